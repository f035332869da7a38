package main

import (
	"context"
	"fmt"
	"math"
	"strings"
	"time"

	"assort/dbio"
	"assort/fit"
	"assort/schema"
)

// fitSpec is everything `assort fit` was asked to do.
type fitSpec struct {
	name      string
	query     string
	key       string
	features  []string
	method    string
	algorithm string // kmeans: "auto" or a fit.Algorithm*
	seeding   string // kmeans: "auto" or a fit.Seeding*
	kText     string
	ks        fit.KRange
	criterion string
	seed      uint64
	restarts  int
	maxIter   int
	tol       float64
	scale     string
	missing   string
	workers   int
	chunkRows int

	// memory
	memText        string
	memory         int64 // --memory in bytes
	spillDir       string
	spillFloat32   bool
	sample         int64   // --sample; 0 when not given
	sampleFraction float64 // --sample-fraction; 0 when not given

	// mixtures
	covariance string
	reg        float64
	floor      float64
	init       string

	json        bool
	wait        time.Duration
	retries     int
	noPublish   bool
	labels      string
	noRenumber  bool
	noFunctions bool
}

const fitSynopsis = "assort fit NAME --query SQL --key COLUMN --k K [flags]"

func runFit(ctx context.Context, e *env, args []string) error {
	s, err := parseFit(e, args)
	if err != nil {
		return err
	}
	res, err := withRetries(ctx, e, s.retries, func() (*summary, error) { return fitJob(ctx, e, s) })
	if err != nil {
		return err
	}
	return report(e, s.json, res)
}

// parseFit parses and checks fit's command line.
func parseFit(e *env, args []string) (*fitSpec, error) {
	s := &fitSpec{}
	fs := e.flagSet("fit", fitSynopsis)
	fs.StringVar(&s.query, "query", "", "SQL query returning the key and the feature columns (required)")
	fs.StringVar(&s.key, "key", "", "column that identifies a row; its type is kept (required)")
	fs.StringSliceVar(&s.features, "features", nil, "feature columns, comma-separated (default: every column but the key)")
	fs.StringVar(&s.method, "method", "kmeans", "kmeans or gmm (Gaussian mixture)")
	fs.StringVar(&s.algorithm, "algorithm", "auto", "kmeans: lloyd, hamerly (exact, same result as lloyd, fewer distances), minibatch (approximate, for very large tables) or auto")
	fs.StringVar(&s.seeding, "seeding", "auto", "kmeans: kmeans++ (greedy), kmeans|| (few passes, for large tables) or auto (kmeans|| from 10^6 rows)")
	fs.StringVar(&s.kText, "k", "", "number of clusters (required): 6, a range 2:12, or a list 3,5,8; with several, --criterion chooses")
	fs.StringVar(&s.criterion, "criterion", "bic", "choice among several k: bic, aic, icl (gmm) or silhouette (kmeans)")
	fs.Uint64Var(&s.seed, "seed", 1, "seed of every random choice; the same seed gives the same result")
	fs.IntVar(&s.restarts, "restarts", 0, "independent starts, the best kept (default: kmeans 10 below 10^5 rows, 4 below 10^6, 1 from there; gmm 4 below 10^6 rows, 2 from there)")
	fs.IntVar(&s.maxIter, "max-iter", 0, "iteration limit per start (default 300 for kmeans, 200 for gmm)")
	fs.Float64Var(&s.tol, "tol", 0, "convergence tolerance (default 1e-4 for kmeans: centre shift relative to total variance; 1e-6 for gmm: change of mean log-likelihood per row)")
	fs.StringVar(&s.scale, "scale", "none", "feature scaling before fitting: none, standard (mean, standard deviation) or robust (median, interquartile range)")
	fs.StringVar(&s.missing, "missing", "fail", "a row with a NULL, NaN or infinite feature: fail, or skip (counted in rows_skipped)")
	fs.StringVar(&s.covariance, "covariance", "full", "gmm: full, diag, spherical or pooled")
	fs.Float64Var(&s.reg, "reg", 1e-6, "gmm: added to covariance diagonals, times the mean feature variance")
	fs.Float64Var(&s.floor, "membership-floor", 0.001, "gmm: smallest membership probability written to the memberships table; 0 keeps all")
	fs.StringVar(&s.init, "init", "kmeans", "gmm: kind of the first start: kmeans, kmeans++ or random (later starts mix kinds)")
	fs.IntVar(&s.workers, "workers", 0, "worker goroutines for the numerics (default GOMAXPROCS)")
	fs.IntVar(&s.chunkRows, "chunk-rows", 0, "rows per chunk read from the server (default 65536, less under a small --memory); results do not depend on it")
	fs.StringVar(&s.memText, "memory", defaultMemory, "memory for the rows and the work on them, as 512MiB, 2GiB or 800MB; rows that do not fit are spilled to --spill-dir (the Go runtime and connections take up to 32 MiB more)")
	fs.StringVar(&s.spillDir, "spill-dir", "", "directory for rows that exceed --memory; the files are unlinked at once and vanish when the run ends, however it ends (default: $TMPDIR or /tmp)")
	fs.BoolVar(&s.spillFloat32, "spill-float32", false, "spill features as float32: half the disk and I/O, about 7 significant digits (relative rounding below 6e-8), so a spilled fit no longer repeats an in-memory one bit for bit")
	fs.Int64Var(&s.sample, "sample", 0, "fit on a uniform random sample of this many rows, drawn while reading (seeded by --seed; --scale is estimated on it), then score every row in a second read of the query in the same snapshot")
	fs.Float64Var(&s.sampleFraction, "sample-fraction", 0, "like --sample, with the sample's size a fraction in (0, 1] of the query's rows (counted first, in the same snapshot)")
	fs.BoolVar(&s.json, "json", false, "print a JSON summary on stdout")
	fs.DurationVar(&s.wait, "wait", 0, "wait this long for another run of the same model to finish (default: exit at once with status 3)")
	fs.IntVar(&s.retries, "retries", 0, "after a lost connection or server restart, run the whole job again up to this many times, with backoff")
	fs.StringVar(&s.labels, "labels", "", "after fitting, compare the clusters with this labelling: a query returning (key, label)")
	fs.BoolVar(&s.noRenumber, "no-renumber", false, "number clusters by size instead of matching them to the published version's")
	fs.BoolVar(&s.noFunctions, "no-functions", false, "create no SQL scoring functions (NAME_vV_cluster...) for the new version")
	fs.BoolVar(&s.noPublish, "no-publish", false, "leave the new version ready but keep the stable views on the published one")
	if err := e.parse(fs, args); err != nil {
		return nil, err
	}
	if fs.NArg() != 1 {
		return nil, usagef("fit takes one model name, got %d arguments", fs.NArg())
	}
	s.name = fs.Arg(0)
	if err := s.check(fs.Changed); err != nil {
		return nil, err
	}
	return s, nil
}

// check validates flags before anything touches the database.
func (s *fitSpec) check(changed func(string) bool) error {
	if err := schema.ValidateModelName(s.name); err != nil {
		return usagef("%v", err)
	}
	switch {
	case strings.TrimSpace(s.query) == "":
		return usagef("--query is required")
	case s.key == "":
		return usagef("--key is required")
	case s.kText == "":
		return usagef("--k is required")
	case s.restarts < 0:
		return usagef("--restarts must not be negative, got %d", s.restarts)
	case s.maxIter < 0:
		return usagef("--max-iter must not be negative, got %d", s.maxIter)
	case s.tol < 0 || math.IsNaN(s.tol) || math.IsInf(s.tol, 0):
		return usagef("--tol must be a non-negative number, got %v", s.tol)
	case s.workers < 0:
		return usagef("--workers must not be negative, got %d", s.workers)
	case s.chunkRows < 0:
		return usagef("--chunk-rows must not be negative, got %d", s.chunkRows)
	case s.wait < 0:
		return usagef("--wait must not be negative, got %s", s.wait)
	case s.retries < 0:
		return usagef("--retries must not be negative, got %d", s.retries)
	}
	mem, merr := dbio.ParseSize(s.memText)
	if merr != nil {
		return usagef("--memory: %v", merr)
	}
	s.memory = mem
	switch {
	case changed("sample") && changed("sample-fraction"):
		return usagef("--sample and --sample-fraction both give the sample's size; give one")
	case changed("sample") && s.sample < 1:
		return usagef("--sample must be at least 1 row, got %d", s.sample)
	case changed("sample-fraction") && !(s.sampleFraction > 0 && s.sampleFraction <= 1):
		return usagef("--sample-fraction must be in (0, 1], got %v", s.sampleFraction)
	case (changed("sample") || changed("sample-fraction")) && (changed("spill-dir") || changed("spill-float32")):
		return usagef("--spill-dir and --spill-float32 do not apply with --sample or --sample-fraction: the sample is held in memory and the rows are read again to score them")
	}
	ks, err := fit.ParseKRange(s.kText)
	if err != nil {
		return usagef("--k: %v", err)
	}
	s.ks = ks
	switch s.criterion {
	case "bic", "aic":
	case "icl":
		if s.method != "gmm" {
			return usagef("--criterion icl applies to --method gmm only")
		}
	case "silhouette":
		if s.method != "kmeans" {
			return usagef("--criterion silhouette applies to --method kmeans only")
		}
	default:
		return usagef("--criterion must be bic, aic, icl or silhouette, got %q", s.criterion)
	}
	switch s.method {
	case "kmeans":
		for _, f := range []string{"covariance", "reg", "membership-floor", "init"} {
			if changed(f) {
				return usagef("--%s applies to --method gmm only", f)
			}
		}
		switch s.algorithm {
		case "auto", fit.AlgorithmLloyd, fit.AlgorithmHamerly, fit.AlgorithmMiniBatch:
		default:
			return usagef("--algorithm must be lloyd, hamerly, minibatch or auto, got %q", s.algorithm)
		}
		switch s.seeding {
		case "auto", fit.SeedingGreedy, fit.SeedingScalable:
		default:
			return usagef("--seeding must be kmeans++, kmeans|| or auto, got %q", s.seeding)
		}
	case "gmm":
		for _, f := range []string{"algorithm", "seeding"} {
			if changed(f) {
				return usagef("--%s applies to --method kmeans only", f)
			}
		}
		switch s.covariance {
		case "full", "diag", "spherical", "pooled":
		default:
			return usagef("--covariance must be full, diag, spherical or pooled, got %q", s.covariance)
		}
		if s.reg < 0 || math.IsNaN(s.reg) || math.IsInf(s.reg, 0) {
			return usagef("--reg must be a non-negative number, got %v", s.reg)
		}
		if !(s.floor >= 0 && s.floor < 1) {
			return usagef("--membership-floor must be in [0, 1), got %v", s.floor)
		}
		switch s.init {
		case "kmeans", "kmeans++", "random":
		default:
			return usagef("--init must be kmeans, kmeans++ or random, got %q", s.init)
		}
	default:
		return usagef("--method must be kmeans or gmm, got %q", s.method)
	}
	switch s.scale {
	case "none", "standard", "robust":
	default:
		return usagef("--scale must be none, standard or robust, got %q", s.scale)
	}
	switch s.missing {
	case "fail", "skip":
	default:
		return usagef("--missing must be fail or skip, got %q", s.missing)
	}
	seen := map[string]bool{}
	for _, f := range s.features {
		if f == "" {
			return usagef("--features: empty column name")
		}
		if seen[f] {
			return usagef("--features: column %q listed twice", f)
		}
		seen[f] = true
	}
	return nil
}

// missingPolicy turns --missing into the reader's policy.
func missingPolicy(flag string) dbio.Missing {
	if flag == "skip" {
		return dbio.MissingSkip
	}
	return dbio.MissingFail
}

// summary is what a finished fit reports.
type summary struct {
	Model       string             `json:"model"`
	Version     int                `json:"version"`
	Method      string             `json:"method"`
	Algorithm   string             `json:"algorithm"`
	K           int                `json:"k"`
	Features    []string           `json:"features"`
	RowsRead    int64              `json:"rows_read"`
	RowsUsed    int64              `json:"rows_used"`
	RowsSkipped int64              `json:"rows_skipped"`
	RowsScored  int64              `json:"rows_scored"` // rows written: RowsUsed, or more after a sample
	Storage     string             `json:"storage"`     // where the fitted rows were: memory, spill or sample
	Inertia     *float64           `json:"inertia,omitempty"`
	LogLik      *float64           `json:"log_likelihood,omitempty"`
	BIC         *float64           `json:"bic,omitempty"`
	AIC         *float64           `json:"aic,omitempty"`
	Iterations  int                `json:"iterations"`
	Converged   bool               `json:"converged"`
	Stop        string             `json:"stop_reason"`
	Table       string             `json:"table"`
	View        string             `json:"view"`
	Memberships string             `json:"memberships_table,omitempty"`
	Published   bool               `json:"published"`
	Clusters    []schema.Component `json:"clusters"`
	Criterion   string             `json:"criterion"`
	Candidates  []schema.Candidate `json:"candidates"`
	Seconds     map[string]float64 `json:"seconds"`
	Comparison  *schema.Comparison `json:"comparison,omitempty"`
}

func report(e *env, asJSON bool, s *summary) error {
	if asJSON {
		return writeJSON(e.stdout, s)
	}
	fmt.Fprintf(e.stdout, "%s@%d: %s, k=%d, %d rows used (%d read, %d skipped)",
		s.Model, s.Version, s.Algorithm, s.K, s.RowsUsed, s.RowsRead, s.RowsSkipped)
	if s.RowsScored != s.RowsUsed {
		fmt.Fprintf(e.stdout, ", fitted on a sample; %d rows scored", s.RowsScored)
	}
	fmt.Fprintln(e.stdout)
	if s.Inertia != nil {
		fmt.Fprintf(e.stdout, "  inertia %.6g", *s.Inertia)
	}
	if s.LogLik != nil {
		fmt.Fprintf(e.stdout, "  log-likelihood %.6g  BIC %.6g  AIC %.6g", *s.LogLik, *s.BIC, *s.AIC)
	}
	conv := "converged"
	if !s.Converged {
		conv = "NOT converged"
	}
	fmt.Fprintf(e.stdout, "  after %d iterations (%s: %s)\n", s.Iterations, conv, s.Stop)
	if s.Published {
		fmt.Fprintf(e.stdout, "  results in %s, published as %s\n", s.Table, s.View)
	} else {
		fmt.Fprintf(e.stdout, "  results in %s, not published\n", s.Table)
	}
	if s.Memberships != "" {
		fmt.Fprintf(e.stdout, "  memberships in %s\n", s.Memberships)
	}
	if err := writeComponents(e.stdout, s.Features, s.Clusters); err != nil {
		return err
	}
	if len(s.Candidates) > 1 {
		if err := writeCandidates(e.stdout, s.Criterion, s.Candidates); err != nil {
			return err
		}
	}
	if s.Comparison != nil {
		fmt.Fprintln(e.stdout)
		return writeComparison(e.stdout, s.Comparison)
	}
	return nil
}
