package main

import (
	"context"
	"errors"
	"fmt"
	"slices"

	"github.com/jackc/pgx/v5"

	"assort/schema"
)

// functionModel gathers what a version's SQL scoring functions inline: its
// scaling and its fitted-space parameters, components in cluster order (the
// order storedModel uses), with a mixture's Cholesky factors recomputed by
// the routine the fit used.
func functionModel(m *schema.Model, comps []schema.Component) (schema.FunctionModel, error) {
	fm := schema.FunctionModel{
		Method: m.Method, Features: m.Features,
		Scale: m.Scale != "none", Center: m.Center, Spread: m.Spread,
	}
	comps = slices.Clone(comps)
	slices.SortFunc(comps, func(a, b schema.Component) int { return a.Cluster - b.Cluster })
	for _, c := range comps {
		fm.Numbers = append(fm.Numbers, c.Cluster)
		fm.Centers = append(fm.Centers, c.FittedCenter...)
	}
	if m.Method == "gmm" {
		mx, err := restoreMixture(m, comps)
		if err != nil {
			return fm, err
		}
		fm.Chol, fm.InvDiag, fm.LogNorm, fm.Diagonal = mx.Factors()
	}
	return fm, nil
}

// createFunctions creates version v's scoring functions in tx and records
// that it has them. Models with more features than a function can take
// get none, with a warning. It returns the function model, nil when none.
func createFunctions(ctx context.Context, e *env, tx pgx.Tx, v schema.Version, m *schema.Model, comps []schema.Component) (*schema.FunctionModel, error) {
	if len(m.Features) > schema.MaxFunctionFeatures {
		e.warnf("%s has %d features, more than an SQL scoring function takes (%d); it gets none", v, len(m.Features), schema.MaxFunctionFeatures)
		return nil, nil
	}
	fm, err := functionModel(m, comps)
	if err != nil {
		return nil, err
	}
	for _, stmt := range schema.FunctionsDDL(v, fm) {
		if _, err := tx.Exec(ctx, stmt); err != nil {
			return nil, fmt.Errorf("create the scoring functions of %s: %w", v, err)
		}
	}
	m.Functions = true
	return &fm, nil
}

// publishFunctions points the stable forwarders NAME_cluster... at version
// v (model m) as part of publishing it, in tx. The forwarders of the
// version published before are dropped first when their signature differs
// (other features or method), and dropped without replacement when v has
// no functions, so that they never answer for another version than the
// one the views show. fm is v's function model, nil when v has no
// functions.
func publishFunctions(ctx context.Context, tx pgx.Tx, reg schema.Registry, v schema.Version, m *schema.Model, fm *schema.FunctionModel) error {
	var stmts []string
	prev, _, err := reg.Model(ctx, tx, v.Model, 0)
	switch {
	case err == nil:
		if fm == nil || prev.Method != m.Method || !slices.Equal(prev.Features, m.Features) {
			stmts = append(stmts, schema.DropStableFunctionsDDL(v.Schema, v.Model, len(prev.Features), prev.Method)...)
		}
	case !errors.Is(err, schema.ErrNoModel):
		return err
	}
	if fm != nil {
		stmts = append(stmts, schema.StableFunctionsDDL(v, *fm)...)
	} else {
		stmts = append(stmts, schema.DropStableFunctionsDDL(v.Schema, v.Model, len(m.Features), m.Method)...)
	}
	for _, stmt := range stmts {
		if _, err := tx.Exec(ctx, stmt); err != nil {
			return fmt.Errorf("publish the scoring functions of %s: %w", v, err)
		}
	}
	return nil
}
