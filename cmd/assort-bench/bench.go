package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"runtime"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"assort/dbio"
	"assort/dbio/localpg"
)

// bench is one run of the benchmark.
type bench struct {
	cfg     config
	log     io.Writer
	rep     *report
	tmp     string // scratch directory, removed at the end
	psql    string
	timeBin string // empty: GNU time missing, peaks from wait4
	url     string // the throwaway server's database
	conn    *pgx.Conn
}

// Tables and models the run creates, in the throwaway server.
const (
	dataSchema   = "bench"
	smallTable   = "small"
	largeTable   = "large"
	floorTable   = "floor_results"
	modelKMeans  = "km_small"
	modelMixture = "gmm_small"
	modelLarge   = "km_large"
)

func newBench(cfg config, log io.Writer) *bench {
	return &bench{cfg: cfg, log: log, rep: &report{
		Machine: machine{CPUs: runtime.NumCPU(), GOMAXPROCS: runtime.GOMAXPROCS(0), GoVersion: runtime.Version()},
		Settings: settings{
			SmallRows: SmallRows, Features: features, Seed: cfg.Seed, Rounds: cfg.Rounds,
			Memory: cfg.Memory, BenchTime: cfg.BenchTime,
			Data: fmt.Sprintf("%d-component Gaussian mixture in %d dimensions, drawn in Go from PCG(seed, 1) and loaded by binary COPY (cmd/assort-bench/mixture.go)", components, features),
		},
		Raw: raw{LoadSeconds: map[string]float64{}, Runs: map[string][]*assortRun{}},
	}}
}

func (b *bench) logf(format string, args ...any) {
	fmt.Fprintf(b.log, "assort-bench: "+format+"\n", args...)
}

// fail records a measurement that could not be made.
func (b *bench) fail(what string, err error) {
	b.rep.Failures = append(b.rep.Failures, fmt.Sprintf("%s: %v", what, err))
	b.logf("%s failed: %v", what, err)
}

// phase notes the start of a phase and the load average then.
func (b *bench) phase(name string) {
	b.rep.Load = append(b.rep.Load, phaseLoad{Phase: name, Load: loadAverage()})
	b.logf("%s (load average %s)", name, formatLoad(loadAverage()))
}

// measure runs every phase it can and returns the report; a phase that
// fails is recorded and, when later phases need it, ends the run early.
// The throwaway server and the scratch directory are removed before it
// returns, also when ctx is cancelled.
func (b *bench) measure(ctx context.Context) *report {
	rep := b.rep
	rep.Started = time.Now().UTC()
	defer func() {
		rep.Finished = time.Now().UTC()
		if ctx.Err() != nil {
			rep.Interrupted = true
			rep.Failures = append(rep.Failures, "interrupted: what was not measured by then is missing")
		}
		b.phase("end")
		b.derive()
	}()
	if err := b.prepare(); err != nil {
		b.fail("prepare", err)
		return rep
	}
	defer func() {
		if err := os.RemoveAll(b.tmp); err != nil {
			b.fail("remove the scratch directory", err)
		}
	}()

	b.numerics(ctx)
	if ctx.Err() != nil {
		return rep
	}

	b.phase("start PostgreSQL")
	srv, err := localpg.Start(ctx, localpg.Options{})
	if err != nil {
		b.fail("start PostgreSQL", err)
		return rep
	}
	defer func() {
		stopCtx, cancel := context.WithTimeout(context.WithoutCancel(ctx), time.Minute)
		defer cancel()
		if err := srv.Stop(stopCtx); err != nil && ctx.Err() == nil {
			b.fail("stop PostgreSQL", err)
		}
	}()
	b.url = srv.URL("")
	if b.conn, err = dbio.Connect(ctx, dbio.ConnConfig{URL: b.url, AppName: "assort-bench"}); err != nil {
		b.fail("connect", err)
		return rep
	}
	defer func() {
		if err := b.conn.Close(context.WithoutCancel(ctx)); err != nil && ctx.Err() == nil {
			b.fail("close the connection", err)
		}
	}()
	if err := b.conn.QueryRow(ctx, "SHOW server_version").Scan(&rep.Machine.PostgreSQL); err != nil {
		b.fail("server version", err)
		return rep
	}
	if _, err := b.conn.Exec(ctx, "CREATE SCHEMA "+pgx.Identifier{dataSchema}.Sanitize()); err != nil {
		b.fail("create schema", err)
		return rep
	}
	if _, err := b.assort(ctx, false, "migrate", "-q"); err != nil {
		b.fail("assort migrate", err)
		return rep
	}
	if !b.small(ctx) || ctx.Err() != nil {
		return rep
	}
	if b.cfg.Rows > SmallRows {
		rep.Settings.LargeRows = b.cfg.Rows
		b.large(ctx)
	}
	return rep
}

// prepare finds psql and GNU time and makes the scratch directory.
func (b *bench) prepare() error {
	var err error
	b.psql = b.cfg.PSQL
	if b.psql == "" {
		if b.psql, err = findPSQL(); err != nil {
			return err
		}
	}
	b.rep.Machine.Psql = b.psql
	if b.tmp, err = os.MkdirTemp("", "assort-bench-"); err != nil {
		return fmt.Errorf("make the scratch directory: %w", err)
	}
	if _, err := os.Stat(b.cfg.TimeBin); err == nil {
		b.timeBin = b.cfg.TimeBin
	} else {
		b.rep.Notes = append(b.rep.Notes, fmt.Sprintf("GNU time (%s) is missing (apt-get install time); peak RSS is wait4's resource usage of the child instead, the same kernel figure", b.cfg.TimeBin))
	}
	return nil
}

// numerics measures the multiply-add rate and runs the fit benchmarks,
// measuring the rate again afterwards.
func (b *bench) numerics(ctx context.Context) {
	b.phase("multiply-add rate")
	b.rep.Raw.MaddRates = append(b.rep.Raw.MaddRates, maddRate(ctx, 2*time.Second))
	if ctx.Err() != nil {
		return
	}
	if b.cfg.FitTest == "" {
		b.fail("fit benchmarks", errors.New("no --fit-test binary given (go test -c ./fit/)"))
	} else {
		b.phase("fit benchmarks")
		res, out, err := runFitBenchmarks(ctx, b.cfg.FitTest, b.tmp, b.cfg.BenchTime)
		b.rep.Raw.FitBench = res
		if err != nil {
			b.fail("fit benchmarks", err)
		} else {
			b.logf("fit benchmarks:\n%s", strings.TrimSpace(out))
		}
	}
	if ctx.Err() != nil {
		return
	}
	b.phase("multiply-add rate again")
	b.rep.Raw.MaddRates = append(b.rep.Raw.MaddRates, maddRate(ctx, 2*time.Second))
}

// small loads the small table and measures, in cfg.Rounds rounds, the
// floors and an assort k-means fit on it, then one mixture fit. It
// reports whether the large part can go on.
func (b *bench) small(ctx context.Context) bool {
	tbl := pgx.Identifier{dataSchema, smallTable}
	b.phase(fmt.Sprintf("load %d rows", SmallRows))
	start := time.Now()
	if err := loadTable(ctx, b.conn, tbl, SmallRows, b.cfg.Seed); err != nil {
		b.fail("load the small table", err)
		return false
	}
	b.rep.Raw.LoadSeconds[smallTable] = time.Since(start).Seconds()

	query := "SELECT id, " + featureList() + " FROM " + tbl.Sanitize()
	fl, err := b.newFloors(ctx, tbl)
	if err != nil {
		b.fail("floors", err)
	}
	for round := 1; round <= b.cfg.Rounds && ctx.Err() == nil; round++ {
		b.phase(fmt.Sprintf("round %d: floors", round))
		if fl != nil {
			if err := fl.round(ctx); err != nil {
				b.fail(fmt.Sprintf("floors, round %d", round), err)
				fl = nil
			}
		}
		b.phase(fmt.Sprintf("round %d: assort fit k-means", round))
		b.fitRun(ctx, runKMeans, "fit", fmt.Sprintf("%s_%d", modelKMeans, round), "--query", query, "--key", "id", "--k", "8", "--method", "kmeans", "--seed", "1")
	}
	if ctx.Err() != nil {
		return false
	}
	b.phase("assort fit k-means, one start")
	b.fitRun(ctx, runKMeansOne, "fit", modelKMeans+"_one", "--query", query, "--key", "id", "--k", "8", "--method", "kmeans", "--seed", "1", "--restarts", "1")
	b.phase("assort fit gmm")
	b.fitRun(ctx, runMixture, "fit", modelMixture, "--query", query, "--key", "id", "--k", "8", "--method", "gmm", "--covariance", "full", "--seed", "1")
	return true
}

// large loads the large table and runs a k-means fit and a scoring on it
// with --memory, where assort has that flag.
func (b *bench) large(ctx context.Context) {
	n := b.cfg.Rows
	tbl := pgx.Identifier{dataSchema, largeTable}
	b.phase(fmt.Sprintf("load %d rows", n))
	start := time.Now()
	if err := loadTable(ctx, b.conn, tbl, n, b.cfg.Seed); err != nil {
		b.fail("load the large table", err)
		return
	}
	b.rep.Raw.LoadSeconds[largeTable] = time.Since(start).Seconds()
	query := "SELECT id, " + featureList() + " FROM " + tbl.Sanitize()

	fitArgs := b.withMemory(ctx, n, "fit", modelLarge, "--query", query, "--key", "id", "--k", "8", "--method", "kmeans", "--seed", "1")
	b.phase(fmt.Sprintf("assort fit k-means, %d rows", n))
	if !b.fitRun(ctx, runLargeFit, fitArgs...) {
		return
	}
	scoreArgs := b.withMemory(ctx, n, "score", modelLarge, "--query", query, "--mode", "replace")
	b.phase(fmt.Sprintf("assort score, %d rows", n))
	b.fitRun(ctx, runLargeScore, scoreArgs...)
}

// withMemory returns the arguments of an assort command (args[0]) on n
// rows with --memory cfg.Memory added when the command has that flag, and
// notes in the report when it has not.
func (b *bench) withMemory(ctx context.Context, n int64, args ...string) []string {
	if b.hasFlag(ctx, args[0], "--memory") {
		return append(args, "--memory", b.cfg.Memory)
	}
	b.rep.Notes = append(b.rep.Notes, fmt.Sprintf("assort %s has no --memory flag yet: the %d-row run went without it", args[0], n))
	return args
}

// fitRun runs assort with --json under GNU time and adds the run to those
// recorded under name; it reports success.
func (b *bench) fitRun(ctx context.Context, name string, args ...string) bool {
	if ctx.Err() != nil {
		return false
	}
	args = append(args, "--json", "-q")
	run := &assortRun{Args: append([]string{"assort"}, args...)}
	b.rep.Raw.Runs[name] = append(b.rep.Raw.Runs[name], run)
	res, err := b.assort(ctx, true, args...)
	if err != nil {
		run.Note = err.Error()
		b.fail(name, err)
		return false
	}
	run.Wall = res.Wall.Seconds()
	run.MaxRSSMiB, run.RSSFrom = float64(res.MaxRSS)/(1<<20), res.RSSFrom
	var sum struct {
		RowsRead  int64              `json:"rows_read"`
		RowsUsed  int64              `json:"rows_used"`
		Algorithm string             `json:"algorithm"`
		Iter      int                `json:"iterations"`
		Converged bool               `json:"converged"`
		Seconds   map[string]float64 `json:"seconds"`
	}
	if err := json.Unmarshal(res.Stdout, &sum); err != nil {
		err = fmt.Errorf("read its --json summary: %w: %s", err, tail(string(res.Stdout), 500))
		run.Note = err.Error()
		b.fail(name, err)
		return false
	}
	run.RowsRead, run.RowsUsed, run.Algorithm, run.Iter, run.Converged, run.Seconds = sum.RowsRead, sum.RowsUsed, sum.Algorithm, sum.Iter, sum.Converged, sum.Seconds
	b.logf("%s: %.2f s wall, peak RSS %.0f MiB, seconds %v", name, run.Wall, run.MaxRSSMiB, sum.Seconds)
	return true
}

// assort runs the assort binary against the throwaway server.
func (b *bench) assort(ctx context.Context, peak bool, args ...string) (procResult, error) {
	full := append([]string{b.cfg.Assort}, args...)
	full = append(full, "-d", b.url)
	return runProc(ctx, procSpec{What: "assort " + args[0], Args: full, PeakRSS: peak}, b.timeBin, b.tmp)
}

// hasFlag reports whether `assort CMD --help` lists flag.
func (b *bench) hasFlag(ctx context.Context, cmd, flag string) bool {
	res, _ := runProc(ctx, procSpec{Args: []string{b.cfg.Assort, cmd, "--help"}}, "", b.tmp)
	help := string(res.Stdout) + string(res.Stderr)
	for _, line := range strings.Split(help, "\n") {
		for _, f := range strings.Fields(line) {
			if strings.TrimSuffix(f, "=") == flag || strings.HasPrefix(f, flag+"=") {
				return true
			}
		}
	}
	return false
}

// loadAverage returns the 1-, 5- and 15-minute load averages from
// /proc/loadavg, or nil where there is none.
func loadAverage() []float64 {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return nil
	}
	f := strings.Fields(string(b))
	if len(f) < 3 {
		return nil
	}
	var la []float64
	for _, s := range f[:3] {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return nil
		}
		la = append(la, v)
	}
	return la
}
