package main

import (
	"context"
	"fmt"

	"github.com/jackc/pgx/v5"

	"assort/dbio"
	"assort/schema"
)

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
	if err := copyResults(ctx, e, conn, v.Results(), ds, out); err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, schema.ResultsKeyDDL(v, key)); err != nil {
		return keyError(key, err)
	}
	if _, err := tx.Exec(ctx, schema.CommentDDL(v.Results(), fmt.Sprintf("assort results of %s (%s, k=%d)", v, m.Method, m.K))); err != nil {
		return err
	}
	if out.memberships != nil {
		if _, err := tx.Exec(ctx, schema.MembershipsDDL(v, key, ds.key.TypeName)); err != nil {
			return fmt.Errorf("create %s: %w", v.Memberships().Sanitize(), err)
		}
		if err := copyMemberships(ctx, conn, v.Memberships(), ds, out); err != nil {
			return err
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

// copyBatch is how many rows a COPY callback encodes at a time.
const copyBatch = 1024

// copyResults loads every row's results into table with a binary COPY.
func copyResults(ctx context.Context, e *env, conn *pgx.Conn, table pgx.Identifier, ds *dataset, out *fitted) error {
	cols := append([]string{ds.key.Name}, schema.ResultColumns...)
	i, n := 0, ds.n()
	_, err := dbio.CopyIn(ctx, conn.PgConn(), table, cols, func(enc *dbio.Encoder) (bool, error) {
		if i > 0 && i == min(n, copyBatch) {
			if err := checkpoint(ctx, e, phaseCopy); err != nil {
				return false, err
			}
		}
		for end := min(i+copyBatch, n); i < end; i++ {
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
	return err
}

// copyMemberships loads the long-form memberships of a mixture into table:
// one row per row and component whose probability reaches the floor.
func copyMemberships(ctx context.Context, conn *pgx.Conn, table pgx.Identifier, ds *dataset, out *fitted) error {
	k := len(out.components)
	i, n := 0, ds.n()
	cols := append([]string{ds.key.Name}, schema.MembershipColumns...)
	_, err := dbio.CopyIn(ctx, conn.PgConn(), table, cols, func(enc *dbio.Encoder) (bool, error) {
		for end := min(i+copyBatch, n); i < end; i++ {
			for j, p := range out.memberships[i*k : (i+1)*k] {
				if p < out.floor || p == 0 {
					continue
				}
				enc.Begin(3)
				enc.Raw(ds.keys.At(i))
				enc.Int4(out.number(j))
				enc.Float8(p)
			}
		}
		return i < n, nil
	})
	return err
}
