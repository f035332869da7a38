package main

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio"
	"assort/fit"
	"assort/schema"
)

// readSpec says what to read.
type readSpec struct {
	query    string
	key      string
	features []string // empty: every column but the key
	missing  dbio.Missing
	// scoring, when set, is the model whose rows are scored: the query
	// must return its key, of the same type, and its features, and nothing
	// else.
	scoring *schema.Model
}

// readTx is a run's read transaction on the reader connection, READ ONLY
// and REPEATABLE READ: every read of the query in it sees one snapshot, so
// a run that reads the query more than once (--sample, then a scoring
// pass; `assort score` with a mixture) sees the same rows each time. It
// stays open from the first COPY to the last, and ends with a rollback,
// never a commit: READ ONLY does not stop everything (large objects,
// notifications), and nothing the query did should persist.
type readTx struct {
	conn     *pgx.Conn
	tx       pgx.Tx
	key      dbio.Column
	features []dbio.Column
	query    string
	missing  dbio.Missing
	ended    bool
}

// openRead begins the read transaction on conn and describes the query:
// its key and feature columns, checked as rs asks.
func openRead(ctx context.Context, conn *pgx.Conn, rs readSpec) (*readTx, error) {
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return nil, fmt.Errorf("begin read: %w", err)
	}
	rt := &readTx{conn: conn, tx: tx, query: rs.query, missing: rs.missing}
	fail := func(err error) (*readTx, error) {
		rt.end(context.WithoutCancel(ctx))
		return nil, err
	}
	cols, err := dbio.Describe(ctx, conn, rs.query)
	if err != nil {
		return fail(err)
	}
	kc, fcs, err := dbio.Resolve(cols, rs.key, rs.features)
	if err != nil {
		return fail(err)
	}
	if err := schema.CheckKeyColumn(kc.Name); err != nil {
		return fail(err)
	}
	if rs.scoring != nil {
		if err := matchesModel(rs.scoring, cols, kc); err != nil {
			return fail(err)
		}
	}
	rt.key, rt.features = kc, fcs
	return rt, nil
}

// names are the feature columns' names.
func (t *readTx) names() []string {
	names := make([]string, len(t.features))
	for i, f := range t.features {
		names[i] = f.Name
	}
	return names
}

// reader starts a read of the query's key and features with a binary
// COPY, in chunks of chunkRows rows.
func (t *readTx) reader(ctx context.Context, chunkRows int) *dbio.Reader {
	names := t.names()
	return dbio.NewReader(ctx, t.conn.PgConn(), dbio.CopySQL(t.query, t.key.Name, names), len(names), dbio.ReaderConfig{
		ChunkRows: chunkRows, Missing: t.missing, KeyType: t.key.TypeOID, KeyName: t.key.Name, Features: names,
	})
}

// feed opens scoring passes that read the query again, scaled by sc (nil:
// as read); each pass's counts go to counts when it ends.
func (t *readTx) feed(chunkRows int, sc *fit.Scaling, counts *readCounts) feedFunc {
	return func(ctx context.Context) (rowFeed, error) {
		return &readerFeed{r: t.reader(ctx, chunkRows), sc: sc, d: len(t.features), counts: counts}, nil
	}
}

// reads reports whether the read transaction holds a lock on any of
// tables, as it does on every table its query reads (taken when the query
// was described, held until the transaction ends). It asks through conn,
// another connection.
func (t *readTx) reads(ctx context.Context, conn *pgx.Conn, tables []pgx.Identifier) (bool, error) {
	names := make([]string, len(tables))
	for i, tb := range tables {
		names[i] = tb.Sanitize()
	}
	var held bool
	err := conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_locks WHERE pid = $1 AND locktype = 'relation'
		AND relation = ANY ($2::text[]::regclass[]))`, t.conn.PgConn().PID(), names).Scan(&held)
	if err != nil {
		return false, fmt.Errorf("find the query's tables: %w", err)
	}
	return held, nil
}

// count returns the number of rows the query returns, in the snapshot.
// The statement is the query wrapped as CopySQL wraps it.
func (t *readTx) count(ctx context.Context) (int64, error) {
	var n int64
	if err := t.conn.QueryRow(ctx, dbio.CountSQL(t.query)).Scan(&n); err != nil {
		return 0, fmt.Errorf("count the query's rows: %w", err)
	}
	return n, nil
}

// end rolls the transaction back. It is idempotent.
func (t *readTx) end(ctx context.Context) error {
	if t.ended {
		return nil
	}
	t.ended = true
	if err := t.tx.Rollback(ctx); err != nil {
		return fmt.Errorf("end read: %w", err)
	}
	return nil
}

// fitJob reads, fits, writes and publishes one new version of a model.
func fitJob(ctx context.Context, e *env, s *fitSpec) (*summary, error) {
	times := map[string]float64{}
	lap := time.Now()
	mark := func(step string) {
		times[step] = time.Since(lap).Seconds()
		lap = time.Now()
	}
	reg := schema.Registry{Schema: e.schema}

	// The writer connection holds the model's lock for the whole run.
	w, release, err := lockedConn(ctx, e, "fit", s.name, s.wait)
	if err != nil {
		return nil, err
	}
	defer release()
	if err := reg.CheckFree(ctx, w, s.name); err != nil {
		return nil, err
	}
	if stale, err := reg.Recover(ctx, w, s.name); err != nil {
		return nil, err
	} else if len(stale) > 0 {
		e.warnf("marked unfinished earlier runs of %s as failed: versions %v", s.name, stale)
	}

	r, err := e.connect(ctx, "read "+s.name)
	if err != nil {
		return nil, err
	}
	defer r.Close(context.WithoutCancel(ctx))
	rt, err := openRead(ctx, r, readSpec{query: s.query, key: s.key, features: s.features, missing: missingPolicy(s.missing)})
	if err != nil {
		return nil, err
	}
	defer rt.end(context.WithoutCancel(ctx))
	plan := newMemPlan(s.memory, len(rt.features), rt.key.TypeOID, s.chunkRows, s.workers, s.method, s.ks[len(s.ks)-1], s.init == fit.InitKMeans)
	if err := plan.check("--memory"); err != nil {
		return nil, err
	}
	defer limitHeap(plan.budget)()
	rd, err := readRows(ctx, e, s, rt, plan)
	defer rd.remove()
	if err != nil {
		return nil, err
	}
	mark("read")
	if s.labels != "" {
		if err := checkLabels(ctx, r, s.labels); err != nil {
			return nil, err
		}
	}
	n, d := rd.fitRows(), len(rt.features)
	e.logf("read %d rows of %d features (%d skipped) in %.2fs", rd.read, d, rd.skipped, times["read"])
	if rd.read == rd.skipped {
		if rd.skipped > 0 {
			return nil, fmt.Errorf("no usable rows: all %d rows read had a NULL, NaN or infinite feature", rd.read)
		}
		return nil, errors.New("no rows: the query returned nothing")
	}
	if top := s.ks[len(s.ks)-1]; top > n {
		what := fmt.Sprintf("the %d usable rows", n)
		if rd.sampled() {
			what = fmt.Sprintf("the %d rows of the sample", n)
		}
		if len(s.ks) == 1 {
			return nil, fmt.Errorf("--k %d is more than %s", top, what)
		}
		return nil, fmt.Errorf("--k %s: the largest candidate, %d, is more than %s", s.kText, top, what)
	}
	e.logf("%s", rd.describe(s))

	scaling, err := scaleFeatures(ctx, e, s, rt.names(), rd.source())
	if err != nil {
		return nil, err
	}
	src, passes := rd.scaled(rt, scaling)
	passes.workers = plan.workers
	if s.restarts == 0 {
		// Record the number of starts actually made, for this run and any
		// retry of it (the rows are the same).
		s.restarts = defaultRestarts(s.method, n)
	}

	m := &schema.Model{
		Name: s.name, Method: s.method, K: s.ks[0], Features: rt.names(),
		KeyColumn: rt.key.Name, KeyType: rt.key.TypeName, Query: s.query, Scale: s.scale,
		Center: scaling.Center, Spread: scaling.Spread,
		Seed: int64(s.seed), Restarts: s.restarts, MaxIter: s.maxIter, Tol: s.tol,
		RowsRead: rd.read, RowsUsed: int64(n), RowsSkipped: rd.skipped,
		ToolVersion: toolVersion,
	}
	if s.method == "gmm" {
		m.Covariance, m.Reg, m.MembershipFloor = s.covariance, s.reg, s.floor
	}
	if err := reg.Reserve(ctx, w, m); err != nil {
		return nil, err
	}
	written := false
	defer func() {
		if !written {
			if err := abandonRun(ctx, e, w, reg, m.Name, m.Version); err != nil {
				e.warnf("could not remove the registry row of %s@%d: %v", m.Name, m.Version, err)
			}
		}
	}()
	v := schema.Version{Schema: e.schema, Model: s.name, N: m.Version}
	e.logf("fitting %s with %s, k=%s", v, s.method, s.kText)
	if err := checkpoint(ctx, e, phaseFit); err != nil {
		return nil, err
	}
	algorithm, err := chooseAlgorithm(s.algorithm, plan.algorithm(rd.resident(), int64(n)))
	if err != nil {
		return nil, err
	}
	var sil *fit.Dense
	if s.method == "kmeans" {
		if sil, err = silhouetteSample(ctx, src, s.seed); err != nil {
			return nil, err
		}
	}
	cands := make([]*candidate, 0, len(s.ks))
	for _, k := range s.ks {
		fm := e.meter(fmt.Sprintf("fit k=%d, all passes", k), 0)
		objective := "inertia"
		if s.method == "gmm" {
			objective = "log-likelihood"
		}
		progress := func(restart, it int, obj float64) {
			st := fmt.Sprintf("start %d of %d, iteration %d", restart+1, s.restarts, it)
			if !math.IsNaN(obj) {
				st += fmt.Sprintf(", %s %.8g", objective, obj)
			}
			fm.setStatus(st)
		}
		c, err := fitCandidate(ctx, s, &countedSource{Source: src, m: fm}, k, algorithm, sil, progress)
		fm.end()
		if err != nil {
			if len(s.ks) > 1 {
				return nil, fmt.Errorf("k=%d: %w", k, err)
			}
			return nil, err
		}
		if it, conv, _ := c.iterations(); !conv {
			e.warnf("%s did not converge with k=%d in %d iterations; the result is recorded with converged = false", v, k, it)
		}
		if len(s.ks) > 1 {
			val, _, _ := c.criterion(s.criterion)
			e.logf("k=%d: %s %.6g (%d passes over the rows)", k, s.criterion, val, passesOver(fm.rows(), n))
		}
		cands = append(cands, c)
	}
	sil = nil
	best := choose(cands, s.criterion)
	if best < 0 {
		return nil, fmt.Errorf("no candidate has a finite %s; every fit is degenerate (rows identical within clusters?)", s.criterion)
	}
	chosen := cands[best]
	chosen.record(m, s)
	out := chosen.fitted(d, scaling, s.floor)
	mark("fit")
	e.logf("fitted in %.2fs: k=%d chosen by %s; %d iterations, %s; %s", times["fit"], chosen.k, s.criterion, m.Iterations, m.StopReason, chosen.objective())
	out.candidates = candidateRows(cands, best)
	out.criterion = s.criterion
	if !s.noRenumber {
		if err := renumberAgainstPublished(ctx, e, w, reg, m, out, scaling); err != nil {
			return nil, err
		}
	}
	rd.dropSample()
	src, cands, chosen = nil, nil, nil

	m.ResultTable = v.Results().Sanitize()
	if err := writeVersion(ctx, e, w, reg, v, m, rt.key, passes, out, !s.noPublish, !s.noFunctions); err != nil {
		return nil, err
	}
	written = true
	mark("write")
	times["write_copy"] = out.copySeconds
	if s.noPublish {
		e.logf("wrote %s in %.2fs; not published (publish it with: assort publish %s)", m.ResultTable, times["write"], v)
	} else {
		e.logf("wrote and published %s in %.2fs", m.ResultTable, times["write"])
	}
	if err := rt.end(ctx); err != nil {
		// The version is committed; the read transaction only read.
		e.warnf("%s was written, but the read transaction did not end cleanly: %v", v, err)
	}

	sum := &summary{
		Model: m.Name, Version: m.Version, Method: m.Method, Algorithm: m.Algorithm, K: m.K,
		Features: m.Features, RowsRead: m.RowsRead, RowsUsed: m.RowsUsed, RowsSkipped: m.RowsSkipped,
		RowsScored: out.scored, Storage: rd.storage(),
		Inertia: m.Inertia, LogLik: m.LogLikelihood, BIC: m.BIC, AIC: m.AIC,
		Iterations: m.Iterations, Converged: m.Converged, Stop: m.StopReason,
		Table: m.ResultTable, View: schema.View(e.schema, m.Name).Sanitize(),
		Published: !s.noPublish, Clusters: out.components, Seconds: times,
		Criterion: out.criterion, Candidates: out.candidates,
	}
	if out.mixture() {
		sum.Memberships = v.Memberships().Sanitize()
	}
	if s.labels != "" {
		// The version is committed: a failed comparison is a warning, not a
		// failed run (which a retry would fit again).
		if c, err := compare(ctx, w, reg, m.Name, m.Version, s.labels, 0); err != nil {
			e.warnf("%s was written; comparing it with the labels failed: %v", v, err)
		} else {
			sum.Comparison = c
		}
	}
	return sum, nil
}

// passesOver is the number of passes over n rows that scanned rows make.
func passesOver(scanned int64, n int) int64 {
	return (scanned + int64(n) - 1) / int64(n)
}

// renumberAgainstPublished matches the new clusters to the published
// version's, when there is one with the same features, and records the
// matching in m.
func renumberAgainstPublished(ctx context.Context, e *env, conn *pgx.Conn, reg schema.Registry, m *schema.Model, out *fitted, sc fit.Scaling) error {
	prev, comps, err := reg.Model(ctx, conn, m.Name, 0)
	if errors.Is(err, schema.ErrNoModel) {
		return nil
	}
	if err != nil {
		return err
	}
	if err := sameFeatures(prev.Features, m.Features); err != nil {
		e.warnf("cluster numbers not matched to %s@%d: %v", prev.Name, prev.Version, err)
		return nil
	}
	cost := renumber(out, comps, sc)
	m.RenumberedAgainst, m.RenumberBasis, m.RenumberCost = &prev.Version, "centres", &cost
	e.logf("cluster numbers matched to %s@%d by centres (total squared distance %.6g)", prev.Name, prev.Version, cost)
	return nil
}

// scaleFeatures fits the scaling --scale asks for on the rows of src (one
// or two passes; "robust" one more per feature), and warns when unscaled
// features have very different spreads. The caller applies it.
func scaleFeatures(ctx context.Context, e *env, s *fitSpec, names []string, src fit.Source) (fit.Scaling, error) {
	if s.scale == "none" && len(names) > 1 {
		sd, err := fit.Spreads(ctx, src, s.workers)
		if err != nil {
			return fit.Scaling{}, err
		}
		lo, hi := 0, 0
		for i := range sd {
			if sd[i] < sd[lo] {
				lo = i
			}
			if sd[i] > sd[hi] {
				hi = i
			}
		}
		if sd[hi] > 100*sd[lo] {
			e.warnf("feature spreads differ by more than 100x (standard deviation of %q is %.3g, of %q %.3g); consider --scale standard or robust",
				names[hi], sd[hi], names[lo], sd[lo])
		}
	}
	sc, constant, err := fit.FitScaling(ctx, src, s.scale)
	if err != nil {
		return fit.Scaling{}, err
	}
	for _, j := range constant {
		e.warnf("feature %q has no spread; it is centred but not scaled", names[j])
	}
	return sc, nil
}

// defaultRestarts is the number of starts when --restarts is not given:
// k-means makes 10 below 10⁵ rows, 4 below 10⁶ and 1 from there, where
// every start costs full passes over a large table and seeding on that
// many rows (k-means|| from 10⁶ rows) varies little between starts;
// mixtures make 4 below 10⁶ rows and 2 from there.
func defaultRestarts(method string, n int) int {
	switch {
	case method == "gmm" && n < 1_000_000:
		return 4
	case method == "gmm":
		return 2
	case n < 100_000:
		return 10
	case n < 1_000_000:
		return 4
	}
	return 1
}

// fitted is a fitted model ready to score rows: its components in
// original units, the model in the units the fit used, and the numbers its
// clusters are published under. It holds nothing per row: the scoring
// passes compute every row's outputs as they write them.
type fitted struct {
	components []schema.Component
	model      *scoringModel
	floor      float64
	// numbers[j] is the published number of the j-th fitted component
	// (memberships columns are in fitted order); nil means j+1.
	numbers []int32

	candidates []schema.Candidate
	criterion  string
	// scored is the number of rows the results pass wrote.
	scored int64
	// copySeconds is the time of the results COPY alone, without the
	// primary key, ANALYZE and registry rows that follow it.
	copySeconds float64
}

// mixture reports whether the model is a mixture, with memberships.
func (f *fitted) mixture() bool { return f.model.mx != nil }

// setSizes records the rows of each fitted cluster, counted by the results
// pass over rows rows, in the components; a k-means component's weight is
// its share of the rows.
func (f *fitted) setSizes(sizes []int64, rows int64) {
	byNumber := make(map[int]int64, len(sizes))
	for j, n := range sizes {
		byNumber[int(f.number(j))] = n
	}
	for i := range f.components {
		c := &f.components[i]
		c.Size = byNumber[c.Cluster]
		if !f.mixture() && rows > 0 {
			c.Weight = float64(c.Size) / float64(rows)
		}
	}
}

// keyError explains a failure to build the primary key: usually a
// duplicated key value, which the server names.
func keyError(key string, err error) error {
	var pgErr *pgconn.PgError
	if duplicateKey(err) && errors.As(err, &pgErr) {
		return fmt.Errorf("key column %q is not unique: %s", key, pgErr.Detail)
	}
	return fmt.Errorf("key column %q: %w", key, err)
}

// duplicateKey reports whether err is the server's unique_violation
// (23505).
func duplicateKey(err error) bool {
	var pgErr *pgconn.PgError
	return errors.As(err, &pgErr) && pgErr.Code == "23505"
}

// candidateRows turns fitted candidates into registry rows.
func candidateRows(cs []*candidate, chosen int) []schema.Candidate {
	rows := make([]schema.Candidate, len(cs))
	for i, c := range cs {
		rows[i] = c.row(i == chosen)
	}
	return rows
}
