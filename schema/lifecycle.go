package schema

import (
	"context"
	"errors"
	"fmt"

	"github.com/jackc/pgx/v5"
)

// publishedSQL selects the version that the stable views of the model
// named by the SQL expression name show: its newest publication.
func (r Registry) publishedSQL(name string) string {
	return "SELECT version FROM " + r.table("publications") + " WHERE name = " + name + newestPublication
}

// newestPublication picks, among a model's publications, the one in force.
const newestPublication = " ORDER BY seq DESC LIMIT 1"

// published returns the version the stable views of model show, 0 for none.
func (r Registry) published(ctx context.Context, q Querier, model string) (int, error) {
	var v int
	err := q.QueryRow(ctx, r.publishedSQL("$1"), model).Scan(&v)
	if errors.Is(err, pgx.ErrNoRows) {
		return 0, nil
	}
	return v, err
}

// Published returns the version the stable views of model show, 0 for none.
func (r Registry) Published(ctx context.Context, q Querier, model string) (int, error) {
	v, err := r.published(ctx, q, model)
	if err != nil {
		return 0, fmt.Errorf("published version of %s: %w", model, err)
	}
	return v, nil
}

// dropObjects drops the tables and scoring functions of version v, whose
// model has d features and the given method. A user's view on one of them
// makes this fail rather than cascade.
func dropObjects(ctx context.Context, tx pgx.Tx, v Version, d int, method string) error {
	for _, stmt := range DropFunctionsDDL(v, d, method) {
		if _, err := tx.Exec(ctx, stmt); err != nil {
			return fmt.Errorf("drop the scoring functions of %s: %w", v, err)
		}
	}
	for _, t := range []pgx.Identifier{v.Memberships(), v.Results()} {
		if _, err := tx.Exec(ctx, "DROP TABLE IF EXISTS "+t.Sanitize()); err != nil {
			return fmt.Errorf("drop %s: %w", t.Sanitize(), err)
		}
	}
	return nil
}

// versionShape is what dropping a version's objects needs to know.
type versionShape struct {
	n      int
	d      int
	method string
}

func scanShapes(rows pgx.Rows) ([]versionShape, error) {
	return pgx.CollectRows(rows, func(r pgx.CollectableRow) (versionShape, error) {
		var s versionShape
		err := r.Scan(&s.n, &s.d, &s.method)
		return s, err
	})
}

// Prune drops the result tables of the ready versions of model older than
// its keep newest ready ones, never the published version, and marks them
// pruned. It returns the versions pruned.
func (r Registry) Prune(ctx context.Context, tx pgx.Tx, model string, keep int) ([]int, error) {
	if keep < 1 {
		panic("schema: Prune needs keep >= 1")
	}
	pub, err := r.published(ctx, tx, model)
	if err != nil {
		return nil, fmt.Errorf("prune %s: %w", model, err)
	}
	rows, err := tx.Query(ctx, "SELECT version, cardinality(features), method FROM "+r.table("models")+
		" WHERE name = $1 AND status = 'ready' ORDER BY version DESC OFFSET $2 FOR UPDATE", model, keep)
	if err != nil {
		return nil, fmt.Errorf("prune %s: %w", model, err)
	}
	old, err := scanShapes(rows)
	if err != nil {
		return nil, fmt.Errorf("prune %s: %w", model, err)
	}
	var pruned []int
	for _, o := range old {
		n := o.n
		if n == pub {
			continue
		}
		v := Version{Schema: r.Schema, Model: model, N: n}
		if err := dropObjects(ctx, tx, v, o.d, o.method); err != nil {
			return nil, err
		}
		if _, err := tx.Exec(ctx, "UPDATE "+r.table("models")+" SET status = 'pruned', functions = false WHERE name = $1 AND version = $2", model, n); err != nil {
			return nil, fmt.Errorf("prune %s: %w", v, err)
		}
		pruned = append(pruned, n)
	}
	return pruned, nil
}

// Drop removes version v: its tables and its registry rows. Its number is
// kept in retired_versions, so that no later version takes it. The
// published version cannot be dropped; publish another one first.
func (r Registry) Drop(ctx context.Context, tx pgx.Tx, v Version) error {
	var status, method string
	var d int
	err := tx.QueryRow(ctx, "SELECT status, cardinality(features), method FROM "+r.table("models")+" WHERE name = $1 AND version = $2 FOR UPDATE",
		v.Model, v.N).Scan(&status, &d, &method)
	if errors.Is(err, pgx.ErrNoRows) {
		return fmt.Errorf("%w: %s", ErrNoModel, v)
	}
	if err != nil {
		return fmt.Errorf("drop %s: %w", v, err)
	}
	pub, err := r.published(ctx, tx, v.Model)
	if err != nil {
		return fmt.Errorf("drop %s: %w", v, err)
	}
	if pub == v.N {
		return fmt.Errorf("drop %s: it is the published version; publish another version first", v)
	}
	if err := dropObjects(ctx, tx, v, d, method); err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, "DELETE FROM "+r.table("models")+" WHERE name = $1 AND version = $2", v.Model, v.N); err != nil {
		return fmt.Errorf("drop %s: %w", v, err)
	}
	// Keep v's number from being given again (see Reserve).
	if _, err := tx.Exec(ctx, "INSERT INTO "+r.table("retired_versions")+` AS t (name, last_version) VALUES ($1, $2)
		ON CONFLICT (name) DO UPDATE SET last_version = greatest(t.last_version, excluded.last_version)`, v.Model, v.N); err != nil {
		return fmt.Errorf("drop %s: %w", v, err)
	}
	return nil
}

// DropModel removes every version of model, its stable views and its
// registry rows, retired numbers included: a model of the same name made
// later starts again at version 1.
func (r Registry) DropModel(ctx context.Context, tx pgx.Tx, model string) error {
	rows, err := tx.Query(ctx, "SELECT version, cardinality(features), method FROM "+r.table("models")+" WHERE name = $1 FOR UPDATE", model)
	if err != nil {
		return fmt.Errorf("drop %s: %w", model, err)
	}
	versions, err := scanShapes(rows)
	if err != nil {
		return fmt.Errorf("drop %s: %w", model, err)
	}
	if len(versions) == 0 {
		return fmt.Errorf("%w: %s", ErrNoModel, model)
	}
	for _, view := range []pgx.Identifier{MembershipsView(r.Schema, model), View(r.Schema, model)} {
		if _, err := tx.Exec(ctx, "DROP VIEW IF EXISTS "+view.Sanitize()); err != nil {
			return fmt.Errorf("drop %s: %w", view.Sanitize(), err)
		}
	}
	for _, o := range versions {
		for _, stmt := range DropStableFunctionsDDL(r.Schema, model, o.d, o.method) {
			if _, err := tx.Exec(ctx, stmt); err != nil {
				return fmt.Errorf("drop the scoring functions of %s: %w", model, err)
			}
		}
		if err := dropObjects(ctx, tx, Version{Schema: r.Schema, Model: model, N: o.n}, o.d, o.method); err != nil {
			return err
		}
	}
	for _, table := range []string{"models", "retired_versions"} {
		if _, err := tx.Exec(ctx, "DELETE FROM "+r.table(table)+" WHERE name = $1", model); err != nil {
			return fmt.Errorf("drop %s: %w", model, err)
		}
	}
	return nil
}
