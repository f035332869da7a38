package main

import (
	"context"
	"fmt"
	"math/rand/v2"
	"strings"

	"github.com/jackc/pgx/v5"

	"assort/dbio"
)

// Shape of the invented data.
const (
	features   = 8 // columns f1 … f8
	components = 8 // mixture components the rows are drawn from
	// meanSpread is the standard deviation of the components' mean
	// coordinates: the means lie about 1.5·√(2·8) ≈ 6 apart, a few of the
	// components' standard deviations, so that the components overlap
	// (as populations in a real catalogue do) and the fits take more than
	// a couple of iterations.
	meanSpread = 1.5
)

// mixture is the invented population the benchmark tables are drawn from:
// components Gaussian components in features dimensions with diagonal
// covariances.
//
// Parameters, drawn once from PCG(seed, 0) in this order: for each
// component c = 0 … 7, the mean μ_c ~ N(0, 1.5² I) and the standard
// deviations σ_cf ~ U[0.5, 1.5). The weights are unequal and fixed,
// w_c = (c + 1)/36.
//
// Rows, drawn from PCG(seed, 1) one after another: row i (id = i, from 1)
// takes component c with probability w_c (one uniform draw, inverted
// through the cumulative weights), then x_f = μ_cf + σ_cf z_f with z_f
// standard normal (rand.NormFloat64), f = 1 … 8. Because the rows are one
// stream, a table of n rows is the first n rows of any larger table of the
// same seed. The numbers are the same on every machine for a given Go
// release (math/rand/v2's PCG and NormFloat64).
type mixture struct {
	mean  [components][features]float64
	sd    [components][features]float64
	cum   [components]float64 // cumulative weights; cum[components-1] = 1
	rows  *rand.Rand
	drawn int64
}

func newMixture(seed uint64) *mixture {
	m := &mixture{rows: rand.New(rand.NewPCG(seed, 1))}
	par := rand.New(rand.NewPCG(seed, 0))
	for c := range components {
		for f := range features {
			m.mean[c][f] = meanSpread * par.NormFloat64()
		}
		for f := range features {
			m.sd[c][f] = 0.5 + par.Float64()
		}
	}
	const total = components * (components + 1) / 2
	acc := 0
	for c := range components {
		acc += c + 1
		m.cum[c] = float64(acc) / total
	}
	return m
}

// next draws the next row into x (len features) and returns its id and
// the component it was drawn from.
func (m *mixture) next(x []float64) (id int64, comp int) {
	u := m.rows.Float64()
	c := 0
	for c < components-1 && u >= m.cum[c] {
		c++
	}
	for f := range x {
		x[f] = m.mean[c][f] + m.sd[c][f]*m.rows.NormFloat64()
	}
	m.drawn++
	return m.drawn, c
}

// featureList is "f1, f2, …, f8", the feature columns in order.
func featureList() string {
	names := make([]string, features)
	for f := range names {
		names[f] = fmt.Sprintf("f%d", f+1)
	}
	return strings.Join(names, ", ")
}

// loadTable creates table (id bigint, f1 … f8 float8) and fills it with
// the first n rows of the seed's mixture with a binary COPY in the same
// transaction (with wal_level=minimal the server then skips the WAL), then
// VACUUM ANALYZE, so that no later read pays for setting hint bits.
func loadTable(ctx context.Context, conn *pgx.Conn, table pgx.Identifier, n int64, seed uint64) error {
	cols := []string{"id"}
	ddl := "CREATE TABLE " + table.Sanitize() + " (id bigint NOT NULL"
	for f := range features {
		name := fmt.Sprintf("f%d", f+1)
		cols = append(cols, name)
		ddl += ", " + pgx.Identifier{name}.Sanitize() + " float8 NOT NULL"
	}
	ddl += ")"
	tx, err := conn.Begin(ctx)
	if err != nil {
		return fmt.Errorf("load %s: %w", table.Sanitize(), err)
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	if _, err := tx.Exec(ctx, ddl); err != nil {
		return fmt.Errorf("load %s: create: %w", table.Sanitize(), err)
	}
	m := newMixture(seed)
	x := make([]float64, features)
	got, err := dbio.CopyIn(ctx, conn.PgConn(), table, cols, dbio.CopyFrozen, func(e *dbio.Encoder) (bool, error) {
		for range 1024 {
			if m.drawn == n {
				return false, nil
			}
			id, _ := m.next(x)
			e.Begin(1 + features)
			e.Int8(id)
			for _, v := range x {
				e.Float8(v)
			}
		}
		return m.drawn < n, nil
	})
	if err != nil {
		return fmt.Errorf("load %s: %w", table.Sanitize(), err)
	}
	if got != n {
		return fmt.Errorf("load %s: the server stored %d rows of %d", table.Sanitize(), got, n)
	}
	if err := tx.Commit(ctx); err != nil {
		return fmt.Errorf("load %s: commit: %w", table.Sanitize(), err)
	}
	if _, err := conn.Exec(ctx, "VACUUM ANALYZE "+table.Sanitize()); err != nil {
		return fmt.Errorf("load %s: vacuum: %w", table.Sanitize(), err)
	}
	return nil
}
