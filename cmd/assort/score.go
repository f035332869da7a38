package main

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"assort/dbio"
	"assort/fit"
	"assort/schema"
)

// scoreSpec is everything `assort score` was asked to do.
type scoreSpec struct {
	name      string
	version   int // 0: the published version
	query     string
	mode      string
	missing   string
	chunkRows int
	workers   int
	memText   string
	memory    int64
	wait      time.Duration
	retries   int
	json      bool
	noPublish bool
}

func runScore(ctx context.Context, e *env, args []string) error {
	var s scoreSpec
	fs := e.flagSet("score", "assort score NAME[@VERSION] --query SQL [--mode upsert|replace]")
	fs.StringVar(&s.query, "query", "", "SQL query returning the model's key and feature columns, by name (required)")
	fs.StringVar(&s.mode, "mode", "upsert", "upsert: add new keys and update changed rows; replace: the version's tables become exactly this query's rows")
	fs.StringVar(&s.missing, "missing", "fail", "a row with a NULL, NaN or infinite feature: fail, or skip")
	fs.IntVar(&s.chunkRows, "chunk-rows", 0, "rows per chunk read from the server (default 65536, less under a small --memory)")
	fs.IntVar(&s.workers, "workers", 0, "worker goroutines scoring rows (default GOMAXPROCS)")
	fs.StringVar(&s.memText, "memory", defaultMemory, "memory for rows in flight and working space, as 512MiB or 2GiB; the rows stream through, so a little suffices")
	fs.DurationVar(&s.wait, "wait", 0, "wait this long for another run of the same model to finish (default: exit at once with status 3)")
	fs.IntVar(&s.retries, "retries", 0, "after a lost connection or server restart, run the whole job again up to this many times, with backoff")
	fs.BoolVar(&s.json, "json", false, "print a JSON summary on stdout")
	fs.BoolVar(&s.noPublish, "no-publish", false, "the rows must not become visible through the stable views: refuse to score the published version")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("score takes one model reference, NAME or NAME@VERSION")
	}
	name, version, err := schema.ParseRef(fs.Arg(0))
	if err != nil {
		return usagef("%v", err)
	}
	s.name, s.version = name, version
	switch {
	case strings.TrimSpace(s.query) == "":
		return usagef("--query is required")
	case s.mode != "upsert" && s.mode != "replace":
		return usagef("--mode must be upsert or replace, got %q", s.mode)
	case s.missing != "fail" && s.missing != "skip":
		return usagef("--missing must be fail or skip, got %q", s.missing)
	case s.chunkRows < 0 || s.wait < 0 || s.retries < 0:
		return usagef("--chunk-rows, --wait and --retries must not be negative")
	case s.workers < 0:
		return usagef("--workers must not be negative, got %d", s.workers)
	}
	if s.memory, err = dbio.ParseSize(s.memText); err != nil {
		return usagef("--memory: %v", err)
	}
	res, err := withRetries(ctx, e, s.retries, func() (*scoreSummary, error) { return scoreJob(ctx, e, &s) })
	if err != nil {
		return err
	}
	if s.json {
		return writeJSON(e.stdout, res)
	}
	fmt.Fprintf(e.stdout, "%s@%d: scored %d rows (%d read, %d skipped) into %s, mode %s\n",
		res.Model, res.Version, res.RowsUsed, res.RowsRead, res.RowsSkipped, res.Table, res.Mode)
	return nil
}

type scoreSummary struct {
	Model       string `json:"model"`
	Version     int    `json:"version"`
	Mode        string `json:"mode"`
	RowsRead    int64  `json:"rows_read"`
	RowsUsed    int64  `json:"rows_used"`
	RowsSkipped int64  `json:"rows_skipped"`
	Table       string `json:"table"`
}

// scoreJob assigns a query's rows with a stored version and merges them
// into that version's tables (or, with --mode replace, writes them in
// place of the tables' rows) in one transaction.
func scoreJob(ctx context.Context, e *env, s *scoreSpec) (*scoreSummary, error) {
	reg := schema.Registry{Schema: e.schema}
	w, release, err := lockedConn(ctx, e, "score", s.name, s.wait)
	if err != nil {
		return nil, err
	}
	defer release()
	m, comps, err := reg.Model(ctx, w, s.name, s.version)
	if err != nil {
		return nil, err
	}
	if m.Status != "ready" {
		return nil, fmt.Errorf("%s@%d is %s; only a ready version can score rows", m.Name, m.Version, m.Status)
	}
	if s.noPublish && m.Published {
		return nil, fmt.Errorf("%s@%d is the published version, so its new rows would be visible at once; with --no-publish score an unpublished version", m.Name, m.Version)
	}
	v := schema.Version{Schema: e.schema, Model: m.Name, N: m.Version}

	r, err := e.connect(ctx, "read "+s.name)
	if err != nil {
		return nil, err
	}
	defer r.Close(context.WithoutCancel(ctx))
	rt, err := openRead(ctx, r, readSpec{query: s.query, key: m.KeyColumn, features: m.Features, missing: missingPolicy(s.missing), scoring: m})
	if err != nil {
		return nil, err
	}
	defer rt.end(context.WithoutCancel(ctx))
	out, err := storedModel(m, comps)
	if err != nil {
		return nil, err
	}
	plan := newMemPlan(s.memory, len(rt.features), rt.key.TypeOID, s.chunkRows, s.workers, m.Method, len(comps), false)
	plan.scoring = true
	if err := plan.check("--memory"); err != nil {
		return nil, err
	}
	defer limitHeap(plan.budget)()
	if err := checkpoint(ctx, e, phaseRead); err != nil {
		return nil, err
	}
	var sc *fit.Scaling
	if m.Scale != "none" {
		sc = &fit.Scaling{Method: m.Scale, Center: m.Center, Spread: m.Spread}
	}
	var counts readCounts
	rp := rowPasses{open: rt.feed(plan.readRows, sc, &counts), rows: -1, workers: plan.workers}

	withMem := out.mixture()
	// Upsert stages the rows in temporary tables and merges them. Replace
	// empties the version's tables and writes the rows straight into them
	// (frozen, as the tables were just truncated), several times faster
	// than a merge; but the truncation's lock would wait for a query that
	// reads those very tables (its read holds a lock on them until it
	// ends), so such a query is replaced through staging, truncating once
	// the read is over. Either way it is one transaction: a failure leaves
	// the tables as they were.
	inPlace := false
	if s.mode == "replace" {
		reads, err := rt.reads(ctx, w, v.Tables(withMem))
		if err != nil {
			return nil, err
		}
		inPlace = !reads
		if reads {
			e.logf("the query reads %s itself; its rows are replaced through staging tables", v)
		}
	}
	tx, err := w.Begin(ctx)
	if err != nil {
		return nil, err
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	results, memberships := schema.StagingResults, schema.StagingMemberships
	prep := schema.StagingDDL(v, withMem)
	if inPlace {
		results, memberships = v.Results(), v.Memberships()
		prep = []string{schema.TruncateSQL(v, withMem)}
	}
	for _, stmt := range prep {
		if _, err := tx.Exec(ctx, stmt); err != nil {
			return nil, fmt.Errorf("prepare %s: %w", v.Results().Sanitize(), err)
		}
	}
	res, err := copyResults(ctx, e, w, results, m.KeyColumn, rp, out)
	if err != nil {
		if duplicateKey(err) { // in place: the primary key of v's table refused a row
			return nil, keyError(m.KeyColumn, err)
		}
		return nil, err
	}
	e.logf("read %d rows (%d skipped) to score with %s", counts.read, counts.skipped, v)
	if !inPlace {
		if _, err := tx.Exec(ctx, schema.StagingKeyDDL(m.KeyColumn)); err != nil {
			return nil, keyError(m.KeyColumn, err)
		}
	}
	if withMem {
		rp.rows = res.rows
		if err := copyMemberships(ctx, e, w, memberships, m.KeyColumn, rp, out); err != nil {
			return nil, err
		}
	}
	if err := rt.end(ctx); err != nil {
		return nil, err
	}
	var finish []string
	switch {
	case inPlace:
		finish = schema.AnalyzeSQL(v, withMem)
	case s.mode == "replace":
		finish = append([]string{schema.TruncateSQL(v, withMem)}, schema.MergeSQL(v, m.KeyColumn, withMem)...)
	default:
		finish = schema.MergeSQL(v, m.KeyColumn, withMem)
	}
	for _, stmt := range finish {
		if _, err := tx.Exec(ctx, stmt); err != nil {
			return nil, fmt.Errorf("merge into %s: %w", v.Results().Sanitize(), err)
		}
	}
	if err := reg.RecordScoring(ctx, tx, v, schema.Scoring{Mode: s.mode, Query: s.query, RowsRead: counts.read, RowsUsed: res.rows, Skipped: counts.skipped}); err != nil {
		return nil, err
	}
	if err := tx.Commit(ctx); err != nil {
		return nil, fmt.Errorf("commit scoring of %s: %w", v, err)
	}
	return &scoreSummary{Model: m.Name, Version: m.Version, Mode: s.mode, RowsRead: counts.read, RowsUsed: res.rows,
		RowsSkipped: counts.skipped, Table: v.Results().Sanitize()}, nil
}

// matchesModel checks that a scoring query returns the model's key, of the
// model's type, and its features, and no other column.
func matchesModel(m *schema.Model, cols []dbio.Column, key dbio.Column) error {
	if key.TypeName != m.KeyType {
		return fmt.Errorf("key column %q is %s here but %s in %s@%d; cast it in the query", key.Name, key.TypeName, m.KeyType, m.Name, m.Version)
	}
	for _, c := range cols {
		if c.Name != m.KeyColumn && !slices.Contains(m.Features, c.Name) {
			return fmt.Errorf("column %q is neither the key nor a feature of %s@%d (features: %s); remove it from the query",
				c.Name, m.Name, m.Version, quoted(m.Features))
		}
	}
	return nil
}

func quoted(names []string) string {
	q := make([]string, len(names))
	for i, n := range names {
		q[i] = strconv.Quote(n)
	}
	return strings.Join(q, ", ")
}

// storedModel restores a stored version for scoring: the version's own
// scaling is applied to the rows as they are read, then its fitted-space
// parameters score them, exactly as the fit scored its rows. Its
// components are in cluster order, so the j-th is cluster comps[j].Cluster.
func storedModel(m *schema.Model, comps []schema.Component) (*fitted, error) {
	d := len(m.Features)
	numbers := make([]int32, len(comps))
	for j, c := range comps {
		numbers[j] = int32(c.Cluster)
	}
	out := &fitted{components: comps, numbers: numbers, floor: m.MembershipFloor}
	switch m.Method {
	case "kmeans":
		centers := make([]float64, 0, len(comps)*d)
		for _, c := range comps {
			centers = append(centers, c.FittedCenter...)
		}
		out.model = &scoringModel{k: len(comps), d: d, centers: centers}
	case "gmm":
		mx, err := restoreMixture(m, comps)
		if err != nil {
			return nil, err
		}
		out.model = &scoringModel{k: len(comps), d: d, mx: mx}
	default:
		return nil, errors.New("unknown method " + m.Method)
	}
	return out, nil
}
