// Package dbtest gives every package's database tests a real PostgreSQL
// database and a fresh schema per test. Tests never skip for want of a
// database: when none can be had, they fail and say why.
//
// A package with database tests calls Main from its TestMain:
//
//	func TestMain(m *testing.M) { dbtest.Main(m) }
//
// and each test takes its own schema, qualifying every name with it:
//
//	url, schema := dbtest.Schema(t)
//
// The database. When ASSORT_TEST_DATABASE_URL is set, tests use that
// database; the role it names must be allowed to create schemas. Otherwise
// the first test that asks for a database starts a throwaway server with
// package localpg (once per test binary, so a run whose tests need no
// database starts none), and Main stops it and removes its directory after
// the tests, whether they passed or not. Should the test binary be killed
// instead, the server shuts itself down on Linux (see localpg) and leaves
// its directory under the temporary directory.
package dbtest

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"os"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"assort/dbio/localpg"
)

// EnvURL names the environment variable holding the URL of an existing
// database to test against instead of a throwaway server.
const EnvURL = "ASSORT_TEST_DATABASE_URL"

// startLimit bounds the start of the throwaway server.
const startLimit = 2 * time.Minute

// stopLimit bounds its fast shutdown, and each schema's DROP at cleanup.
const stopLimit = time.Minute

// The state of one test binary: whether Main runs it, and the database,
// set up at most once.
var (
	mainRunning bool // set by Main before any test runs

	once     sync.Once
	baseURL  string
	server   *localpg.Server // nil when EnvURL is used or start failed
	startErr error
)

// Main runs the package's tests with m.Run, stops the throwaway server if
// one was started, and exits with m.Run's code, or 1 if the server could
// not be stopped. Call it from TestMain.
func Main(m *testing.M) {
	os.Exit(run(m))
}

// run is Main without the exit, so that its deferred work always runs.
func run(m *testing.M) (code int) {
	mainRunning = true
	defer func() {
		if server == nil {
			return
		}
		ctx, cancel := context.WithTimeout(context.Background(), stopLimit)
		defer cancel()
		if err := server.Stop(ctx); err != nil {
			fmt.Fprintf(os.Stderr, "dbtest: %v\n", err)
			if code == 0 {
				code = 1
			}
		}
	}()
	return m.Run()
}

// setUp picks the database: EnvURL if set, else a new local server.
func setUp() {
	if u := os.Getenv(EnvURL); u != "" {
		baseURL = u
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), startLimit)
	defer cancel()
	srv, err := localpg.Start(ctx, localpg.Options{})
	if err != nil {
		startErr = fmt.Errorf("no database for the tests (set %s to use an existing one): %w", EnvURL, err)
		return
	}
	server, baseURL = srv, srv.URL("postgres")
}

// URL returns the connection URL of the test database, starting the
// throwaway server on first use. It fails the test when Main is not in
// charge of the test binary or no database can be had.
func URL(t testing.TB) string {
	t.Helper()
	if !mainRunning {
		t.Fatal("dbtest: call dbtest.Main(m) from this package's TestMain, so that the test server is stopped after the tests")
	}
	once.Do(setUp)
	if startErr != nil {
		t.Fatalf("dbtest: %v", startErr)
	}
	return baseURL
}

// Schema creates a schema with a fresh name (t_ and 16 hex digits) for the
// test and drops it, with everything in it, when the test and its subtests
// end. The returned URL is the database's; its search_path is not changed,
// so the test qualifies its names with the schema.
func Schema(t testing.TB) (url, schema string) {
	t.Helper()
	url = URL(t)
	b := make([]byte, 8)
	if _, err := rand.Read(b); err != nil {
		t.Fatalf("dbtest: schema name: %v", err)
	}
	schema = "t_" + hex.EncodeToString(b)
	ident := pgx.Identifier{schema}.Sanitize()
	if err := execAlone(t.Context(), url, "CREATE SCHEMA "+ident); err != nil {
		t.Fatalf("dbtest: create schema %s: %v", schema, err)
	}
	t.Cleanup(func() {
		// t.Context() is already cancelled when cleanup runs.
		ctx, cancel := context.WithTimeout(context.Background(), stopLimit)
		defer cancel()
		if err := execAlone(ctx, url, "DROP SCHEMA IF EXISTS "+ident+" CASCADE"); err != nil {
			t.Errorf("dbtest: drop schema %s: %v", schema, err)
		}
	})
	return url, schema
}

// Conn returns a connection to the test database, closed when the test
// ends.
func Conn(t testing.TB) *pgx.Conn {
	t.Helper()
	url := URL(t)
	conn, err := pgx.Connect(t.Context(), url)
	if err != nil {
		t.Fatalf("dbtest: connect: %v", err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), stopLimit)
		defer cancel()
		if err := conn.Close(ctx); err != nil {
			t.Errorf("dbtest: close connection: %v", err)
		}
	})
	return conn
}

// execAlone runs one statement on a connection of its own.
func execAlone(ctx context.Context, url, sql string) (err error) {
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		return fmt.Errorf("connect: %w", err)
	}
	defer func() {
		if cerr := conn.Close(ctx); cerr != nil && err == nil {
			err = fmt.Errorf("close: %w", cerr)
		}
	}()
	if _, err := conn.Exec(ctx, sql); err != nil {
		return err
	}
	return nil
}
