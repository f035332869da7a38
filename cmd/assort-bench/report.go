package main

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"
	"time"
)

// report is everything a run measured: the raw figures, the rows of the
// results table derived from them, and what could not be measured.
type report struct {
	Started  time.Time `json:"started"`
	Finished time.Time `json:"finished"`
	Machine  machine   `json:"machine"`
	Settings settings  `json:"settings"`
	// Load is the load average (1, 5, 15 minutes) at the start of each
	// phase, in order.
	Load    []phaseLoad `json:"load_average"`
	Results []resultRow `json:"results"`
	Raw     raw         `json:"raw"`
	Notes   []string    `json:"notes"`
	// Failures are the measurements that could not be made, and why.
	Failures []string `json:"failures"`
	// Interrupted is set when the run was cut short by SIGINT or SIGTERM.
	Interrupted bool `json:"interrupted"`
}

type machine struct {
	CPUs       int    `json:"cpus"`
	GOMAXPROCS int    `json:"gomaxprocs"`
	GoVersion  string `json:"go_version"`
	PostgreSQL string `json:"postgresql"`
	Psql       string `json:"psql"`
}

type settings struct {
	SmallRows int64  `json:"small_rows"`
	LargeRows int64  `json:"large_rows"` // 0: large part skipped
	Features  int    `json:"features"`
	Seed      uint64 `json:"seed"`
	Rounds    int    `json:"rounds"`
	Memory    string `json:"memory"`
	BenchTime string `json:"benchtime"`
	Data      string `json:"data"`
}

type phaseLoad struct {
	Phase string    `json:"phase"`
	Load  []float64 `json:"load"`
}

// raw holds the measured figures before any ratio is taken.
type raw struct {
	// MaddRates are the multiply-add rates (per second, all cores) measured
	// before and after the fit benchmarks; the larger is used.
	MaddRates []float64              `json:"madd_rates"`
	FitBench  map[string]benchResult `json:"fit_benchmarks"`
	// Seconds of each floor run on the small table, one per round.
	ReadFloor      []float64 `json:"read_floor_seconds"`
	WriteFloor     []float64 `json:"write_floor_seconds"`
	WriteFloorFull []float64 `json:"write_floor_with_key_seconds"`
	// LoadSeconds is how long generating and loading each table took.
	LoadSeconds map[string]float64 `json:"load_seconds"`
	// Runs are the assort runs by name (runKMeans, ...): one per round
	// for runKMeans, one for the others.
	Runs map[string][]*assortRun `json:"assort_runs"`
}

// Names of the assort runs.
const (
	runKMeans     = "fit_kmeans_small"
	runKMeansOne  = "fit_kmeans_small_one_start"
	runMixture    = "fit_gmm_small"
	runLargeFit   = "fit_kmeans_large"
	runLargeScore = "score_kmeans_large"
)

// assortRun is one run of assort: its command line, wall time, peak
// memory and what its --json summary said.
type assortRun struct {
	Args      []string           `json:"args"`
	Wall      float64            `json:"wall_seconds"`
	MaxRSSMiB float64            `json:"max_rss_mib"`
	RSSFrom   string             `json:"max_rss_from"`
	RowsRead  int64              `json:"rows_read"`
	RowsUsed  int64              `json:"rows_used"`
	Algorithm string             `json:"algorithm,omitempty"`
	Iter      int                `json:"iterations,omitempty"`
	Converged bool               `json:"converged,omitempty"`
	Seconds   map[string]float64 `json:"seconds,omitempty"`
	Note      string             `json:"note,omitempty"`
}

// resultRow is one line of the results table. Value, Baseline and Ratio
// are nil when not measured (Missing says why) or when there is none.
type resultRow struct {
	Measure    string   `json:"measure"`
	Value      *float64 `json:"value"`
	Unit       string   `json:"unit"`
	Baseline   *float64 `json:"baseline"`
	BaselineOf string   `json:"baseline_of,omitempty"`
	Ratio      *float64 `json:"ratio"`
	Target     *target  `json:"target"`
	Met        *bool    `json:"met"`
	Missing    string   `json:"missing,omitempty"`
}

// target is a goal from the issue: Of ("ratio" or "value") compared by Op
// ("≥", "≤" or "<") with Limit.
type target struct {
	Of    string  `json:"of"`
	Op    string  `json:"op"`
	Limit float64 `json:"limit"`
}

func (t *target) String() string {
	if t == nil {
		return "—"
	}
	return fmt.Sprintf("%s %g", t.Op, t.Limit)
}

// check says whether v meets the target.
func (t *target) check(v float64) bool {
	switch t.Op {
	case "≥":
		return v >= t.Limit
	case "≤":
		return v <= t.Limit
	case "<":
		return v < t.Limit
	}
	panic("assort-bench: unknown target operator " + t.Op)
}

// addRow appends a row. value and baseline may be NaN (not measured, or no
// baseline); the ratio is value ÷ baseline; the target, when given, is
// checked against the ratio or the value.
func (r *report) addRow(measure string, value float64, unit string, baseline float64, baselineOf string, tg *target, missing string) {
	row := resultRow{Measure: measure, Unit: unit, BaselineOf: baselineOf, Target: tg, Missing: missing}
	if !math.IsNaN(value) {
		row.Value = &value
	}
	if !math.IsNaN(baseline) {
		row.Baseline = &baseline
	}
	if row.Value != nil && row.Baseline != nil && baseline > 0 {
		ratio := value / baseline
		row.Ratio = &ratio
	}
	if tg != nil {
		var v *float64
		switch tg.Of {
		case "ratio":
			v = row.Ratio
		case "value":
			v = row.Value
		}
		if v != nil {
			met := tg.check(*v)
			row.Met = &met
		}
	}
	if row.Value == nil && row.Missing == "" {
		row.Missing = "not measured"
	}
	r.Results = append(r.Results, row)
}

// formatValue prints v in unit for the table.
func formatValue(v float64, unit string) string {
	switch unit {
	case "rows/s":
		return fmt.Sprintf("%.3g M rows/s", v/1e6)
	case "madd/s":
		return fmt.Sprintf("%.3g G madd/s", v/1e9)
	case "s":
		if v < 1 {
			return fmt.Sprintf("%.1f ms", v*1e3)
		}
		return fmt.Sprintf("%.2f s", v)
	case "MiB":
		return fmt.Sprintf("%.0f MiB", v)
	}
	return fmt.Sprintf("%.4g %s", v, unit)
}

// writeTable prints the results table, then the notes and the failures.
func (r *report) writeTable(w io.Writer) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "measure\tvalue\tbaseline\tratio\ttarget\tmet?")
	for _, row := range r.Results {
		value, baseline, ratio, met := "—", "—", "—", "—"
		if row.Value != nil {
			value = formatValue(*row.Value, row.Unit)
		} else {
			value = row.Missing
		}
		if row.Baseline != nil {
			baseline = formatValue(*row.Baseline, row.Unit)
			if row.BaselineOf != "" {
				baseline += " (" + row.BaselineOf + ")"
			}
		}
		if row.Ratio != nil {
			ratio = fmt.Sprintf("%.2f", *row.Ratio)
		}
		if row.Met != nil {
			met = "yes"
			if !*row.Met {
				met = "NO"
			}
		} else if row.Target != nil {
			met = "n/a"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\n", row.Measure, value, baseline, ratio, row.Target, met)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "machine: %d CPUs (GOMAXPROCS %d), %s, PostgreSQL %s\n", r.Machine.CPUs, r.Machine.GOMAXPROCS, r.Machine.GoVersion, r.Machine.PostgreSQL)
	var loads []string
	for _, l := range r.Load {
		loads = append(loads, fmt.Sprintf("%s %s", l.Phase, formatLoad(l.Load)))
	}
	fmt.Fprintf(w, "load average (1/5/15 min) at each phase: %s\n", strings.Join(loads, "; "))
	for _, n := range r.Notes {
		fmt.Fprintf(w, "- %s\n", n)
	}
	for _, f := range r.Failures {
		fmt.Fprintf(w, "NOT MEASURED: %s\n", f)
	}
	return nil
}

func formatLoad(l []float64) string {
	if len(l) < 3 {
		return "?"
	}
	return fmt.Sprintf("%.2f/%.2f/%.2f", l[0], l[1], l[2])
}

// writeJSONFile writes the report to path, creating its directory.
func (r *report) writeJSONFile(path string) error {
	if dir := filepath.Dir(path); dir != "." {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return fmt.Errorf("write %s: %w", path, err)
		}
	}
	b, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := os.WriteFile(path, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}
