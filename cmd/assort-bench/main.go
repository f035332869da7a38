// Command assort-bench measures assort's speed as ratios to PostgreSQL's
// own, all in one run on one machine, so that the ratios hold even when
// the machine is shared and its absolute speed varies. It is what
// `make bench` (scripts/bench.sh) runs.
//
// It starts a throwaway PostgreSQL (package dbio/localpg), loads invented
// tables of 10⁶ (and optionally 10⁷) rows × 8 float8 features drawn from a
// Gaussian mixture (see mixture.go), and measures:
//
//   - floors: psql's COPY (SELECT id, f1, ..., f8 FROM t) TO STDOUT
//     (FORMAT binary) into /dev/null, and psql's COPY FROM STDIN of a binary
//     file of result rows into a table of the result shape;
//   - assort: read and write rates from `assort fit --json`'s seconds, the
//     wall time and peak resident set size of `assort fit` (k-means and a
//     full-covariance mixture, k = 8), and on the large table `assort fit`
//     and `assort score` with --memory;
//   - numerics: per-iteration costs from the fit package's benchmarks (a
//     compiled `go test -c ./fit/` binary), against an arithmetic floor of
//     n·k·d multiply-adds at the rate of a tight Go loop measured in the
//     same run (madd.go).
//
// The results are printed as a table (measure, value, baseline, ratio,
// target, met?) and written as JSON. The exit status is 0 when every
// measurement was made (whether or not its target was met), 1 when some
// could not be, 2 for a bad command line and 130 when interrupted (SIGINT
// or SIGTERM: the server is stopped and removed, and so are the scratch
// files, before it exits).
//
// Usage:
//
//	assort-bench --assort bin/assort [--fit-test fit.test] [--rows 1e7] [--json FILE]
//
// Examples:
//
//	go build -o /tmp/assort ./cmd/assort && go test -c -o /tmp/fit.test ./fit/
//	assort-bench --assort /tmp/assort --fit-test /tmp/fit.test --json bench.json
//	assort-bench --assort /tmp/assort --rows 1e6    # quick: no 10⁷-row part
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"os/signal"
	"strconv"
	"syscall"

	"github.com/spf13/pflag"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// config is what a run is asked to do. Zero values mean the defaults
// documented on each field.
type config struct {
	// Assort is the assort binary to measure (required).
	Assort string
	// FitTest is a test binary of package fit (`go test -c ./fit/`);
	// empty: the numerics benchmarks are not run and reported as missing.
	FitTest string
	// Rows is the row count of the large table; at most SmallRows skips
	// the large part. 0 means 10⁷.
	Rows int64
	// JSON is the file the results are written to as JSON; empty: none.
	JSON string
	// Rounds is how many rounds of the small-table measurements are made:
	// each round times the read floor, the write floors and an assort
	// k-means fit, one after the other, so that the machine's changing load
	// falls on floors and assort alike; medians over the rounds are used.
	// 0 means 5.
	Rounds int
	// Seed seeds the invented data. 0 means 1.
	Seed uint64
	// Memory is the --memory budget given to assort on the large table.
	// Empty means 256MiB.
	Memory string
	// BenchTime is the fit benchmarks' -test.benchtime. Empty means 1s.
	BenchTime string
	// PSQL is the psql binary. Empty means psql on PATH, else the newest
	// /usr/lib/postgresql/*/bin/psql.
	PSQL string
	// TimeBin is GNU time, for peak resident set sizes. Empty means
	// /usr/bin/time; when it is missing the peak comes from wait4's
	// resource usage of the child instead, which is the same number.
	TimeBin string
}

// SmallRows is the row count of the small table, on which every ratio is
// measured.
const SmallRows = 1_000_000

func (c config) withDefaults() config {
	if c.Rows == 0 {
		c.Rows = 10 * SmallRows
	}
	if c.Rounds == 0 {
		c.Rounds = 5
	}
	if c.Seed == 0 {
		c.Seed = 1
	}
	if c.Memory == "" {
		c.Memory = "256MiB"
	}
	if c.BenchTime == "" {
		c.BenchTime = "1s"
	}
	if c.TimeBin == "" {
		c.TimeBin = "/usr/bin/time"
	}
	return c
}

const usageText = `usage: assort-bench --assort PATH [flags]

Measures assort's read, write, fit and end-to-end speed as ratios to
PostgreSQL's own COPY and to an arithmetic floor, in one run against a
throwaway PostgreSQL, and prints a table of the results.

flags:
%s
examples:
  assort-bench --assort bin/assort --fit-test /tmp/fit.test --json .bench/bench.json
  assort-bench --assort bin/assort --rows 1e6      # skip the 10^7-row part
`

// run parses args, measures, prints the table on stdout and progress on
// stderr, and returns the exit status.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	cfg, err := parseFlags(args, stderr)
	if errors.Is(err, pflag.ErrHelp) {
		return 0
	}
	if err != nil {
		fmt.Fprintf(stderr, "assort-bench: %v\n", err)
		return 2
	}
	b := newBench(cfg, stderr)
	rep := b.measure(ctx)
	if err := rep.writeTable(stdout); err != nil {
		fmt.Fprintf(stderr, "assort-bench: print results: %v\n", err)
		return 1
	}
	if cfg.JSON != "" {
		if err := rep.writeJSONFile(cfg.JSON); err != nil {
			fmt.Fprintf(stderr, "assort-bench: %v\n", err)
			return 1
		}
		fmt.Fprintf(stderr, "assort-bench: results written to %s\n", cfg.JSON)
	}
	if rep.Interrupted {
		fmt.Fprintln(stderr, "assort-bench: interrupted; the server and the scratch files are removed")
		return 130
	}
	if len(rep.Failures) > 0 {
		fmt.Fprintf(stderr, "assort-bench: %d measurement(s) could not be made:\n", len(rep.Failures))
		for _, f := range rep.Failures {
			fmt.Fprintf(stderr, "  %s\n", f)
		}
		return 1
	}
	return 0
}

// parseFlags reads the command line into a config with defaults applied.
func parseFlags(args []string, stderr io.Writer) (config, error) {
	var c config
	var rows string
	fs := pflag.NewFlagSet("assort-bench", pflag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() { fmt.Fprintf(stderr, usageText, fs.FlagUsages()) }
	fs.StringVar(&c.Assort, "assort", "", "assort binary to measure (required)")
	fs.StringVar(&c.FitTest, "fit-test", "", "test binary of package fit (go test -c ./fit/); empty: numerics benchmarks not run")
	fs.StringVar(&rows, "rows", "1e7", "rows of the large table (1e7, 10000000...); 1e6 or less skips the large part")
	fs.StringVar(&c.JSON, "json", "", "also write the results as JSON to this file")
	fs.IntVar(&c.Rounds, "rounds", 5, "rounds of read floor, write floors and k-means fit on the small table; medians are used")
	fs.Uint64Var(&c.Seed, "seed", 1, "seed of the invented data")
	fs.StringVar(&c.Memory, "memory", "256MiB", "--memory budget given to assort on the large table")
	fs.StringVar(&c.BenchTime, "benchtime", "1s", "-test.benchtime of the fit benchmarks")
	fs.StringVar(&c.PSQL, "psql", "", "psql binary (default: on PATH, else /usr/lib/postgresql/*/bin/psql)")
	fs.StringVar(&c.TimeBin, "time", "/usr/bin/time", "GNU time, for peak resident set sizes")
	if err := fs.Parse(args); err != nil {
		return c, err
	}
	switch {
	case fs.NArg() > 0:
		return c, fmt.Errorf("unexpected arguments %q (see --help)", fs.Args())
	case c.Assort == "":
		return c, errors.New("--assort is required: the assort binary to measure (go build -o bin/assort ./cmd/assort)")
	case c.Rounds < 1:
		return c, fmt.Errorf("--rounds must be at least 1, got %d", c.Rounds)
	}
	n, err := parseCount(rows)
	if err != nil {
		return c, fmt.Errorf("--rows: %w", err)
	}
	c.Rows = n
	return c.withDefaults(), nil
}

// parseCount reads a positive whole number written plainly or in
// scientific notation: "10000000", "1e7", "2.5e6".
func parseCount(s string) (int64, error) {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || v < 1 || v > 1e12 || v != math.Trunc(v) {
		return 0, fmt.Errorf("want a whole number of rows such as 1e6 or 10000000, got %q", s)
	}
	return int64(v), nil
}
