package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/spf13/pflag"

	"assort/dbio"
	"assort/schema"
)

// toolVersion is recorded with every model.
const toolVersion = "assort 0.1.0"

// command is one subcommand: its flags are added to fs, then it runs.
type command struct {
	name    string
	summary string
	run     func(ctx context.Context, env *env, args []string) error
}

func commands() []command {
	return []command{
		{"migrate", "create or upgrade the registry", runMigrate},
		{"fit", "fit a model to a query's rows and publish a new version", runFit},
		{"score", "assign new rows with a stored version, without refitting", runScore},
		{"publish", "point a model's stable views at one of its versions", runPublish},
		{"prune", "drop the result tables of old unpublished versions", runPrune},
		{"drop", "drop one version of a model, or the whole model", runDrop},
		{"compare", "compare a version's clusters with a known labelling or with another version", runCompare},
		{"models", "list model versions", runModels},
		{"show", "show one model version and its clusters", runShow},
		{"demo", "run the whole job on invented data in a throwaway PostgreSQL", runDemo},
	}
}

// env is what every command shares: where to write, and its parsed common
// flags.
type env struct {
	stdout, stderr io.Writer
	db             string
	schema         string
	quiet          bool

	statementTimeout time.Duration
	lockTimeout      time.Duration
}

// Defaults of the server-side timeouts: long enough for a COPY of a
// billion-row table, short enough that a stuck run does not hold a
// scheduler slot forever.
const (
	defaultStatementTimeout = 6 * time.Hour
	defaultLockTimeout      = time.Minute
)

// logf writes a progress line to stderr unless --quiet.
func (e *env) logf(format string, args ...any) {
	if !e.quiet {
		fmt.Fprintf(e.stderr, "assort: "+format+"\n", args...)
	}
}

// warnf always writes.
func (e *env) warnf(format string, args ...any) {
	fmt.Fprintf(e.stderr, "assort: warning: "+format+"\n", args...)
}

// run is the whole program; it returns the exit status.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	e := &env{stdout: stdout, stderr: stderr}
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		fmt.Fprint(stdout, usage())
		if len(args) == 0 {
			return exitUsage
		}
		return exitOK
	}
	for _, c := range commands() {
		if c.name == args[0] {
			err := c.run(ctx, e, args[1:])
			if errors.Is(err, pflag.ErrHelp) {
				return exitOK
			}
			if err != nil {
				fmt.Fprintf(stderr, "assort %s: %v\n", c.name, err)
				if exitStatus(err) == exitUsage {
					fmt.Fprintf(stderr, "run 'assort %s --help' for usage\n", c.name)
				}
			}
			return exitStatus(err)
		}
	}
	fmt.Fprintf(stderr, "assort: unknown command %q\nrun 'assort --help' for usage\n", args[0])
	return exitUsage
}

// flagSet makes a FlagSet for a command with the flags every command
// shares.
func (e *env) flagSet(name, synopsis string) *pflag.FlagSet {
	fs := pflag.NewFlagSet("assort "+name, pflag.ContinueOnError)
	fs.SetOutput(e.stderr)
	fs.SortFlags = false
	fs.StringVarP(&e.db, "db", "d", "", "libpq connection string or URL (default: $DATABASE_URL, then libpq's PG* variables)")
	fs.StringVar(&e.schema, "schema", schema.DefaultSchema, "schema of the registry and the result tables")
	fs.BoolVarP(&e.quiet, "quiet", "q", false, "no progress lines on stderr")
	fs.DurationVar(&e.statementTimeout, "statement-timeout", defaultStatementTimeout, "server-side limit on any one statement (0: none)")
	fs.DurationVar(&e.lockTimeout, "lock-timeout", defaultLockTimeout, "server-side limit on waiting for a table lock (0: none)")
	fs.Usage = func() {
		fmt.Fprintf(e.stderr, "usage: %s\n\nflags:\n%s", synopsis, fs.FlagUsages())
	}
	return fs
}

// parse parses args and checks the shared flags.
func (e *env) parse(fs *pflag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, pflag.ErrHelp) {
			return err
		}
		return usagef("%v", err)
	}
	if err := schema.ValidateSchemaName(e.schema); err != nil {
		return usagef("--schema: %v", err)
	}
	if e.statementTimeout < 0 || e.lockTimeout < 0 {
		return usagef("--statement-timeout and --lock-timeout must not be negative")
	}
	return nil
}

// connect opens a connection named for the command in pg_stat_activity.
func (e *env) connect(ctx context.Context, role string) (*pgx.Conn, error) {
	return dbio.Connect(ctx, dbio.ConnConfig{URL: e.db, AppName: "assort " + role, Settings: map[string]string{
		"statement_timeout": strconv.FormatInt(e.statementTimeout.Milliseconds(), 10),
		"lock_timeout":      strconv.FormatInt(e.lockTimeout.Milliseconds(), 10),
		// The read transaction waits, idle, while a sample is fitted.
		"idle_in_transaction_session_timeout": "0",
	}})
}

func usage() string {
	var b strings.Builder
	b.WriteString(`assort clusters rows held in PostgreSQL and writes the results back as
versioned tables that plain SQL can join.

usage: assort COMMAND [flags]

commands:
`)
	for _, c := range commands() {
		fmt.Fprintf(&b, "  %-8s %s\n", c.name, c.summary)
	}
	b.WriteString(`
Every command takes -d/--db, --schema and -q/--quiet; 'assort COMMAND --help'
lists the rest.

examples:
  assort demo
  assort migrate -d postgres:///catalogue
  assort fit galaxies --query 'SELECT source_id, g_r, r_i, i_z FROM survey.sources' \
      --key source_id --k 6 --seed 7
  assort show galaxies
  psql -c 'SELECT s.*, c.cluster FROM survey.sources s JOIN assort.galaxies c USING (source_id)'
`)
	return b.String()
}
