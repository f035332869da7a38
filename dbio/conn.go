package dbio

import (
	"context"
	"fmt"
	"os"

	"github.com/jackc/pgx/v5"
)

// ConnConfig says how to reach the database and how the session behaves.
type ConnConfig struct {
	// URL is a libpq connection string or URL. Empty means the
	// DATABASE_URL environment variable, and when that is empty too,
	// libpq's PG* variables and defaults (as pgx parses them).
	URL string
	// AppName is reported as application_name, so that a DBA can see the
	// session in pg_stat_activity.
	AppName string
	// Settings are run-time parameters sent at connection start, such as
	// statement_timeout. Values are sent as given.
	Settings map[string]string
}

// Connect opens one connection.
func Connect(ctx context.Context, cfg ConnConfig) (*pgx.Conn, error) {
	url := cfg.URL
	if url == "" {
		url = os.Getenv("DATABASE_URL")
	}
	pc, err := pgx.ParseConfig(url)
	if err != nil {
		return nil, fmt.Errorf("connection string: %w", err)
	}
	if cfg.AppName != "" {
		pc.RuntimeParams["application_name"] = cfg.AppName
	}
	for k, v := range cfg.Settings {
		pc.RuntimeParams[k] = v
	}
	conn, err := pgx.ConnectConfig(ctx, pc)
	if err != nil {
		return nil, fmt.Errorf("connect: %w", err)
	}
	return conn, nil
}
