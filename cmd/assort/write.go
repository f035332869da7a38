package main

import (
	"context"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"assort/dbio"
	"assort/schema"
)

// rowPasses is how writing reaches a run's rows: every pass opens a new
// feed (over a store, or a new read of the query in the run's snapshot)
// and goes through the rows in the same order.
type rowPasses struct {
	open feedFunc
	// rows is the number of rows every pass must produce, or -1 when it is
	// not known before the first.
	rows    int64
	workers int
}

// writeVersion creates v's result tables, loads them with COPY, records the
// model and publishes it, all in one transaction: a failure or a kill at
// any point leaves nothing visible. The rows are scored as they are
// written, in pipelined passes over rp: one for the results, and for a
// mixture a second for the memberships.
func writeVersion(ctx context.Context, e *env, conn *pgx.Conn, reg schema.Registry, v schema.Version, m *schema.Model, key dbio.Column, rp rowPasses, out *fitted, publish, functions bool) error {
	tx, err := conn.Begin(ctx)
	if err != nil {
		return fmt.Errorf("write %s: %w", v, err)
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	if _, err := tx.Exec(ctx, schema.ResultsDDL(v, key.Name, key.TypeName)); err != nil {
		return fmt.Errorf("create %s: %w", v.Results().Sanitize(), err)
	}
	if err := checkpoint(ctx, e, phaseWrite); err != nil {
		return err
	}
	start := time.Now()
	res, err := copyResults(ctx, e, conn, v.Results(), key.Name, rp, out)
	if err != nil {
		return err
	}
	out.copySeconds = time.Since(start).Seconds()
	out.scored = res.rows
	out.setSizes(res.sizes, res.rows)
	if _, err := tx.Exec(ctx, schema.ResultsKeyDDL(v, key.Name)); err != nil {
		return keyError(key.Name, err)
	}
	if _, err := tx.Exec(ctx, schema.CommentDDL(v.Results(), fmt.Sprintf("assort results of %s (%s, k=%d)", v, m.Method, m.K))); err != nil {
		return err
	}
	if out.mixture() {
		if _, err := tx.Exec(ctx, schema.MembershipsDDL(v, key.Name, key.TypeName)); err != nil {
			return fmt.Errorf("create %s: %w", v.Memberships().Sanitize(), err)
		}
		rp.rows = res.rows
		if err := copyMemberships(ctx, e, conn, v.Memberships(), key.Name, rp, out); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, schema.MembershipsKeyDDL(v, key.Name)); err != nil {
			return fmt.Errorf("index %s: %w", v.Memberships().Sanitize(), err)
		}
		if _, err := tx.Exec(ctx, schema.CommentDDL(v.Memberships(), "assort membership probabilities of "+v.String())); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, "ANALYZE "+v.Memberships().Sanitize()); err != nil {
			return fmt.Errorf("analyze %s: %w", v.Memberships().Sanitize(), err)
		}
	}
	if _, err := tx.Exec(ctx, "ANALYZE "+v.Results().Sanitize()); err != nil {
		return fmt.Errorf("analyze %s: %w", v.Results().Sanitize(), err)
	}
	var fm *schema.FunctionModel
	if functions {
		if fm, err = createFunctions(ctx, e, tx, v, m, out.components); err != nil {
			return err
		}
	}
	if publish {
		// Before Finish marks v ready: the forwarders compare v with the
		// version published until now.
		if err := publishFunctions(ctx, tx, reg, v, m, fm); err != nil {
			return err
		}
	}
	if err := reg.Finish(ctx, tx, m, out.components); err != nil {
		return err
	}
	if err := reg.RecordCandidates(ctx, tx, m, out.criterion, out.candidates); err != nil {
		return err
	}
	if publish {
		if err := reg.Publish(ctx, tx, v, out.mixture()); err != nil {
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

// copyBatch is how many rows a COPY callback encodes at a time.
const copyBatch = 1024

// copyResults scores every row of rp and loads its results into table with
// a binary COPY: the key, the cluster's published number, the membership
// of that cluster (1 for k-means), the distance to its centre and the log
// density (NULL for k-means). It returns the rows written and the rows of
// each fitted cluster.
func copyResults(ctx context.Context, e *env, conn *pgx.Conn, table pgx.Identifier, key string, rp rowPasses, out *fitted) (passResult, error) {
	cols := append([]string{key}, schema.ResultColumns...)
	mix := out.mixture()
	res, err := copyPass(ctx, e, conn, table, cols, passSpec{
		name: "write results", total: max(rp.rows, 0), want: rp.rows, open: rp.open, workers: rp.workers, k: out.model.k,
		work: out.model.results,
		encode: func(enc *dbio.Encoder, b *batch, i int) {
			enc.Begin(5)
			enc.Raw(b.keys.At(i))
			enc.Int4(out.number(int(b.label[i])))
			if mix {
				enc.Float8(b.prob[i])
			} else {
				enc.Float8(1)
			}
			enc.Float8(b.dist[i])
			if mix {
				enc.Float8(b.logd[i])
			} else {
				enc.Null()
			}
		},
		started: func() error { return checkpoint(ctx, e, phaseCopy) },
	})
	return res, err
}

// copyMemberships scores every row of rp again and loads the long-form
// memberships of a mixture into table: one row per row and component whose
// probability reaches the floor (and is not 0).
func copyMemberships(ctx context.Context, e *env, conn *pgx.Conn, table pgx.Identifier, key string, rp rowPasses, out *fitted) error {
	k := out.model.k
	cols := append([]string{key}, schema.MembershipColumns...)
	_, err := copyPass(ctx, e, conn, table, cols, passSpec{
		name: "write memberships", total: max(rp.rows, 0), want: rp.rows, open: rp.open, workers: rp.workers, k: k,
		work: out.model.memberships,
		encode: func(enc *dbio.Encoder, b *batch, i int) {
			for j, p := range b.mem[i*k : (i+1)*k] {
				if p < out.floor || p == 0 {
					continue
				}
				enc.Begin(3)
				enc.Raw(b.keys.At(i))
				enc.Int4(out.number(j))
				enc.Float8(p)
			}
		},
	})
	return err
}

// passMismatch is the error of a pass that did not see the rows the one
// before it saw. Passes over a store always agree; passes that read the
// query again run in the same snapshot, and disagree only when the query
// itself does (random(), TABLESAMPLE, volatile functions).
func passMismatch(want, got int64) error {
	return fmt.Errorf("the query returned %d usable rows on one read and %d on the next, in the same snapshot; "+
		"a query read more than once (--sample, mixtures' memberships when scoring) must return the same rows every time: "+
		"no random(), TABLESAMPLE or volatile functions", want, got)
}

// number is the cluster number of the j-th fitted component.
func (f *fitted) number(j int) int32 {
	if f.numbers == nil {
		return int32(j + 1)
	}
	return f.numbers[j]
}
