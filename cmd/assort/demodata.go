package main

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/jackc/pgx/v5"
)

// The demo catalogue is invented: the "Lantern Deep Field", a survey of our
// own making, with four populations of sources told apart by their colours.
// Nothing here describes a real survey or real objects.
type population struct {
	name   string
	weight float64
	mean   [3]float64 // g-r, r-i, i-z
	sd     [3]float64
	corr   float64 // shared component between the three colours
}

var demoPopulations = []population{
	{"pale halo", 0.40, [3]float64{0.40, 0.15, 0.06}, [3]float64{0.12, 0.10, 0.09}, 0.5},
	{"ember dwarfs", 0.30, [3]float64{1.30, 0.80, 0.40}, [3]float64{0.16, 0.18, 0.12}, 0.6},
	{"amber giants", 0.20, [3]float64{0.90, 0.40, 0.22}, [3]float64{0.14, 0.12, 0.10}, 0.4},
	{"blue knots", 0.10, [3]float64{0.15, -0.05, 0.30}, [3]float64{0.12, 0.10, 0.12}, 0.2},
}

// demoRows is the size of the demo catalogue.
const demoRows = 100_000

// loadDemo creates schema.sources with demoRows invented sources; the same
// rows every time.
func loadDemo(ctx context.Context, conn *pgx.Conn, schemaName string) error {
	s := pgx.Identifier{schemaName}.Sanitize()
	table := pgx.Identifier{schemaName, "sources"}
	if _, err := conn.Exec(ctx, "DROP SCHEMA IF EXISTS "+s+" CASCADE; CREATE SCHEMA "+s+`;
CREATE TABLE `+table.Sanitize()+` (
    source_id  bigint PRIMARY KEY,
    population text   NOT NULL, -- the truth the demo generated, for checking
    r_mag      float8 NOT NULL,
    g_r        float8 NOT NULL,
    r_i        float8 NOT NULL,
    i_z        float8 NOT NULL
)`); err != nil {
		return fmt.Errorf("create demo catalogue: %w", err)
	}
	rng := rand.New(rand.NewPCG(2026, 12))
	rows := make([][]any, 0, demoRows)
	for i := range demoRows {
		u, p := rng.Float64(), demoPopulations[len(demoPopulations)-1]
		for _, q := range demoPopulations {
			if u < q.weight {
				p = q
				break
			}
			u -= q.weight
		}
		shared := rng.NormFloat64()
		var c [3]float64
		for j := range c {
			c[j] = p.mean[j] + p.sd[j]*(p.corr*shared+(1-p.corr)*rng.NormFloat64())
		}
		rmag := 16 + 6*rng.Float64()
		rows = append(rows, []any{int64(1_000_001 + i*7), p.name, rmag, c[0], c[1], c[2]})
	}
	if _, err := conn.CopyFrom(ctx, table, []string{"source_id", "population", "r_mag", "g_r", "r_i", "i_z"}, pgx.CopyFromRows(rows)); err != nil {
		return fmt.Errorf("load demo catalogue: %w", err)
	}
	if _, err := conn.Exec(ctx, "ANALYZE "+table.Sanitize()); err != nil {
		return fmt.Errorf("analyze demo catalogue: %w", err)
	}
	return nil
}
