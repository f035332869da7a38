package main

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio"
	"assort/fit"
	"assort/schema"
)

// dataset is a query's rows held in memory: keys as the server sent them
// and features as float64, row-major.
type dataset struct {
	key      dbio.Column
	features []dbio.Column
	keys     dbio.Keys
	x        []float64
	read     int64
	skipped  int64
}

func (d *dataset) n() int { return d.keys.Len() }
func (d *dataset) featureNames() []string {
	names := make([]string, len(d.features))
	for i, f := range d.features {
		names[i] = f.Name
	}
	return names
}

// readSpec says what to read.
type readSpec struct {
	query     string
	key       string
	features  []string // empty: every column but the key
	missing   dbio.Missing
	chunkRows int
	// scoring, when set, is the model whose rows are scored: the query
	// must return its key, of the same type, and its features, and nothing
	// else.
	scoring *schema.Model
}

// readDataset runs the user's query inside a READ ONLY, REPEATABLE READ
// transaction and reads its key and features with a binary COPY.
func readDataset(ctx context.Context, e *env, conn *pgx.Conn, rs readSpec) (*dataset, error) {
	query, key, features, missing, chunkRows := rs.query, rs.key, rs.features, rs.missing, rs.chunkRows
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return nil, fmt.Errorf("begin read: %w", err)
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	cols, err := dbio.Describe(ctx, conn, query)
	if err != nil {
		return nil, err
	}
	kc, fcs, err := dbio.Resolve(cols, key, features)
	if err != nil {
		return nil, err
	}
	if err := schema.CheckKeyColumn(kc.Name); err != nil {
		return nil, err
	}
	if rs.scoring != nil {
		if err := matchesModel(rs.scoring, cols, kc); err != nil {
			return nil, err
		}
	}
	ds := &dataset{key: kc, features: fcs}
	names := ds.featureNames()
	if err := checkpoint(ctx, e, phaseRead); err != nil {
		return nil, err
	}
	r := dbio.NewReader(ctx, conn.PgConn(), dbio.CopySQL(query, kc.Name, names), len(fcs), dbio.ReaderConfig{
		ChunkRows: chunkRows, Missing: missing, KeyType: kc.TypeOID, KeyName: kc.Name, Features: names,
	})
	for r.Next() {
		c := r.Chunk()
		for i := range c.N {
			ds.keys.Append(c.Keys.At(i))
		}
		ds.x = append(ds.x, c.X[:c.N*c.D]...)
	}
	if err := r.Err(); err != nil {
		r.Close()
		return nil, fmt.Errorf("read: %w", err)
	}
	if err := r.Close(); err != nil {
		return nil, fmt.Errorf("read: %w", err)
	}
	ds.read, ds.skipped = r.RowsRead(), r.RowsSkipped()
	// Roll back, never commit: READ ONLY does not stop everything (large
	// objects, notifications), and nothing the query did should persist.
	if err := tx.Rollback(ctx); err != nil {
		return nil, fmt.Errorf("end read: %w", err)
	}
	return ds, nil
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
	w, err := e.connect(ctx, "fit "+s.name)
	if err != nil {
		return nil, err
	}
	defer w.Close(context.WithoutCancel(ctx))
	if err := schema.Check(ctx, w, e.schema); err != nil {
		return nil, err
	}
	if err := lockModel(ctx, w, reg, s.name, s.wait); err != nil {
		return nil, err
	}
	defer reg.Unlock(context.WithoutCancel(ctx), w, s.name)
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
	ds, err := readDataset(ctx, e, r, readSpec{query: s.query, key: s.key, features: s.features, missing: s.missingPolicy(), chunkRows: s.chunkRows})
	if err != nil {
		return nil, err
	}
	mark("read")
	if s.labels != "" {
		if err := checkLabels(ctx, r, s.labels); err != nil {
			return nil, err
		}
	}
	n, d := ds.n(), len(ds.features)
	e.logf("read %d rows of %d features (%d skipped) in %.2fs", ds.read, d, ds.skipped, times["read"])
	if n == 0 {
		if ds.skipped > 0 {
			return nil, fmt.Errorf("no usable rows: all %d rows read had a NULL, NaN or infinite feature", ds.read)
		}
		return nil, errors.New("no rows: the query returned nothing")
	}
	if top := s.ks[len(s.ks)-1]; top > n {
		if len(s.ks) == 1 {
			return nil, fmt.Errorf("--k %d is more than the %d usable rows", top, n)
		}
		return nil, fmt.Errorf("--k %s: the largest candidate, %d, is more than the %d usable rows", s.kText, top, n)
	}

	src := fit.NewDense(ds.x, d)
	scaling, err := scaleFeatures(ctx, e, s, ds, src)
	if err != nil {
		return nil, err
	}

	m := &schema.Model{
		Name: s.name, Method: s.method, K: s.ks[0], Features: ds.featureNames(),
		KeyColumn: ds.key.Name, KeyType: ds.key.TypeName, Query: s.query, Scale: s.scale,
		Center: scaling.Center, Spread: scaling.Spread,
		Seed: int64(s.seed), Restarts: s.restarts, MaxIter: s.maxIter, Tol: s.tol,
		RowsRead: ds.read, RowsUsed: int64(n), RowsSkipped: ds.skipped,
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
	cands := make([]*candidate, 0, len(s.ks))
	for _, k := range s.ks {
		c, err := fitCandidate(ctx, s, src, k)
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
			e.logf("k=%d: %s %.6g", k, s.criterion, val)
		}
		cands = append(cands, c)
	}
	best := choose(cands, s.criterion)
	if best < 0 {
		return nil, fmt.Errorf("no candidate has a finite %s; every fit is degenerate (rows identical within clusters?)", s.criterion)
	}
	chosen := cands[best]
	chosen.record(m, s)
	out := chosen.score(src, scaling, s.floor)
	mark("fit")
	e.logf("fitted in %.2fs: k=%d chosen by %s; %d iterations, %s", times["fit"], chosen.k, s.criterion, m.Iterations, m.StopReason)
	out.candidates = candidateRows(cands, best)
	out.criterion = s.criterion
	if !s.noRenumber {
		if err := renumberAgainstPublished(ctx, e, w, reg, m, out, scaling); err != nil {
			return nil, err
		}
	}

	m.ResultTable = v.Results().Sanitize()
	if err := writeVersion(ctx, e, w, reg, v, m, ds, out, !s.noPublish); err != nil {
		return nil, err
	}
	written = true
	mark("write")
	if s.noPublish {
		e.logf("wrote %s in %.2fs; not published (publish it with: assort publish %s)", m.ResultTable, times["write"], v)
	} else {
		e.logf("wrote and published %s in %.2fs", m.ResultTable, times["write"])
	}

	sum := &summary{
		Model: m.Name, Version: m.Version, Method: m.Method, Algorithm: m.Algorithm, K: m.K,
		Features: m.Features, RowsRead: m.RowsRead, RowsUsed: m.RowsUsed, RowsSkipped: m.RowsSkipped,
		Inertia: m.Inertia, LogLik: m.LogLikelihood, BIC: m.BIC, AIC: m.AIC,
		Iterations: m.Iterations, Converged: m.Converged, Stop: m.StopReason,
		Table: m.ResultTable, View: schema.View(e.schema, m.Name).Sanitize(),
		Published: !s.noPublish, Clusters: out.components, Seconds: times,
		Criterion: out.criterion, Candidates: out.candidates,
	}
	if out.memberships != nil {
		sum.Memberships = v.Memberships().Sanitize()
	}
	if s.labels != "" {
		c, err := compare(ctx, w, reg, m.Name, m.Version, s.labels, 0)
		if err != nil {
			return nil, fmt.Errorf("%s was written; comparing it with the labels failed: %w", v, err)
		}
		sum.Comparison = c
	}
	return sum, nil
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

// scaleFeatures centres and scales the rows in place as --scale asks and
// warns when unscaled features have very different spreads.
func scaleFeatures(ctx context.Context, e *env, s *fitSpec, ds *dataset, src *fit.Dense) (fit.Scaling, error) {
	names := ds.featureNames()
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
	if s.scale != "none" {
		sc.Apply(ds.x, ds.x)
	}
	return sc, nil
}

// fitted is a model's per-row results, aligned with the dataset's rows,
// and its components in original units.
type fitted struct {
	components  []schema.Component
	cluster     []int32   // 1-based
	probability []float64 // nil means 1 for every row
	distance    []float64
	logDensity  []float64 // nil for k-means
	// memberships[i*k+j] is row i's probability of cluster j+1; nil for k-means.
	memberships []float64
	floor       float64
	// numbers[j] is the published number of the j-th fitted component
	// (memberships columns are in fitted order); nil means j+1.
	numbers []int32

	candidates []schema.Candidate
	criterion  string
}

// keyError explains a failure to build the primary key: usually a
// duplicated key value, which the server names.
func keyError(key string, err error) error {
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) && pgErr.Code == "23505" {
		return fmt.Errorf("key column %q is not unique: %s", key, pgErr.Detail)
	}
	return fmt.Errorf("key column %q: %w", key, err)
}

// number is the cluster number of the j-th fitted component.
func (f *fitted) number(j int) int32 {
	if f.numbers == nil {
		return int32(j + 1)
	}
	return f.numbers[j]
}

// candidateRows turns fitted candidates into registry rows.
func candidateRows(cs []*candidate, chosen int) []schema.Candidate {
	rows := make([]schema.Candidate, len(cs))
	for i, c := range cs {
		it, conv, _ := c.iterations()
		rows[i] = schema.Candidate{
			K: c.k, Inertia: c.inertia, LogLikelihood: c.logL, Params: c.params,
			BIC: c.bic, AIC: c.aic, ICL: c.icl, Silhouette: c.silhouette,
			Iterations: it, Converged: conv, Chosen: i == chosen,
		}
	}
	return rows
}
