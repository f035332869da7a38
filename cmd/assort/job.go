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

// readDataset runs the user's query inside a READ ONLY, REPEATABLE READ
// transaction and reads its key and features with a binary COPY.
func readDataset(ctx context.Context, e *env, conn *pgx.Conn, query, key string, features []string, missing dbio.Missing, chunkRows int) (*dataset, error) {
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
	if err := tx.Commit(ctx); err != nil {
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
	ds, err := readDataset(ctx, e, r, s.query, s.key, s.features, s.missingPolicy(), s.chunkRows)
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
			if err := reg.Abandon(context.WithoutCancel(ctx), w, m.Name, m.Version); err != nil {
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

	candidates []schema.Candidate
	criterion  string
}

// writeVersion creates v's result tables, loads them with COPY, records the
// model and publishes it, all in one transaction: a failure or a kill at
// any point leaves nothing visible.
func writeVersion(ctx context.Context, e *env, conn *pgx.Conn, reg schema.Registry, v schema.Version, m *schema.Model, ds *dataset, out *fitted, publish bool) error {
	tx, err := conn.Begin(ctx)
	if err != nil {
		return fmt.Errorf("write %s: %w", v, err)
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	key := ds.key.Name
	if _, err := tx.Exec(ctx, schema.ResultsDDL(v, key, ds.key.TypeName)); err != nil {
		return fmt.Errorf("create %s: %w", v.Results().Sanitize(), err)
	}
	if err := checkpoint(ctx, e, phaseWrite); err != nil {
		return err
	}
	cols := append([]string{key}, schema.ResultColumns...)
	i, n := 0, ds.n()
	_, err = dbio.CopyIn(ctx, conn.PgConn(), v.Results(), cols, func(enc *dbio.Encoder) (bool, error) {
		if i > 0 && i == min(n, 1024) {
			if err := checkpoint(ctx, e, phaseCopy); err != nil {
				return false, err
			}
		}
		for end := min(i+1024, n); i < end; i++ {
			enc.Begin(5)
			enc.Raw(ds.keys.At(i))
			enc.Int4(out.cluster[i])
			if out.probability != nil {
				enc.Float8(out.probability[i])
			} else {
				enc.Float8(1)
			}
			enc.Float8(out.distance[i])
			if out.logDensity != nil {
				enc.Float8(out.logDensity[i])
			} else {
				enc.Null()
			}
		}
		return i < n, nil
	})
	if err != nil {
		return fmt.Errorf("copy into %s: %w", v.Results().Sanitize(), err)
	}
	if _, err := tx.Exec(ctx, schema.ResultsKeyDDL(v, key)); err != nil {
		return keyError(key, err)
	}
	if _, err := tx.Exec(ctx, schema.CommentDDL(v.Results(), fmt.Sprintf("assort results of %s (%s, k=%d)", v, m.Method, m.K))); err != nil {
		return err
	}
	if out.memberships != nil {
		if err := writeMemberships(ctx, tx, conn, v, ds, out); err != nil {
			return err
		}
	}
	if _, err := tx.Exec(ctx, "ANALYZE "+v.Results().Sanitize()); err != nil {
		return fmt.Errorf("analyze %s: %w", v.Results().Sanitize(), err)
	}
	if err := reg.Finish(ctx, tx, m, out.components); err != nil {
		return err
	}
	if err := reg.RecordCandidates(ctx, tx, m, out.criterion, out.candidates); err != nil {
		return err
	}
	if publish {
		if err := reg.Publish(ctx, tx, v, out.memberships != nil); err != nil {
			return err
		}
	}
	if err := checkpoint(ctx, e, phasePublish); err != nil {
		return err
	}
	if err := tx.Commit(ctx); err != nil {
		return fmt.Errorf("commit %s: %w", v, err)
	}
	return nil
}

// writeMemberships loads the long-form memberships table of a mixture.
func writeMemberships(ctx context.Context, tx pgx.Tx, conn *pgx.Conn, v schema.Version, ds *dataset, out *fitted) error {
	key := ds.key.Name
	if _, err := tx.Exec(ctx, schema.MembershipsDDL(v, key, ds.key.TypeName)); err != nil {
		return fmt.Errorf("create %s: %w", v.Memberships().Sanitize(), err)
	}
	k := len(out.components)
	i, n := 0, ds.n()
	cols := append([]string{key}, schema.MembershipColumns...)
	_, err := dbio.CopyIn(ctx, conn.PgConn(), v.Memberships(), cols, func(enc *dbio.Encoder) (bool, error) {
		for end := min(i+1024, n); i < end; i++ {
			for j, p := range out.memberships[i*k : (i+1)*k] {
				if p < out.floor || p == 0 {
					continue
				}
				enc.Begin(3)
				enc.Raw(ds.keys.At(i))
				enc.Int4(int32(j + 1))
				enc.Float8(p)
			}
		}
		return i < n, nil
	})
	if err != nil {
		return fmt.Errorf("copy into %s: %w", v.Memberships().Sanitize(), err)
	}
	if _, err := tx.Exec(ctx, schema.MembershipsKeyDDL(v, key)); err != nil {
		return fmt.Errorf("index %s: %w", v.Memberships().Sanitize(), err)
	}
	if _, err := tx.Exec(ctx, schema.CommentDDL(v.Memberships(), "assort membership probabilities of "+v.String())); err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, "ANALYZE "+v.Memberships().Sanitize()); err != nil {
		return fmt.Errorf("analyze %s: %w", v.Memberships().Sanitize(), err)
	}
	return nil
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
