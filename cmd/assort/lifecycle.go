package main

import (
	"context"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"assort/schema"
)

// modelTx runs fn in one transaction on a fresh connection that holds the
// model's lock, after checking the registry.
func modelTx(ctx context.Context, e *env, role, model string, wait time.Duration, fn func(tx pgx.Tx, reg schema.Registry) error) error {
	conn, release, err := lockedConn(ctx, e, role, model, wait)
	if err != nil {
		return err
	}
	defer release()
	reg := schema.Registry{Schema: e.schema}
	tx, err := conn.Begin(ctx)
	if err != nil {
		return err
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	if err := fn(tx, reg); err != nil {
		return err
	}
	return tx.Commit(ctx)
}

func runPublish(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("publish", "assort publish NAME@VERSION")
	wait := fs.Duration("wait", 0, "wait this long for another run of the same model to finish")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("publish takes one model version, NAME@VERSION")
	}
	name, version, err := schema.ParseRef(fs.Arg(0))
	if err != nil {
		return usagef("%v", err)
	}
	if version == 0 {
		return usagef("publish needs a version: %s@VERSION", name)
	}
	v := schema.Version{Schema: e.schema, Model: name, N: version}
	err = modelTx(ctx, e, "publish", name, *wait, func(tx pgx.Tx, reg schema.Registry) error {
		m, comps, err := reg.Model(ctx, tx, name, version)
		if err != nil {
			return err
		}
		if m.Status != "ready" {
			return fmt.Errorf("publish %s: the version is %s, only a ready version can be published", v, m.Status)
		}
		var fm *schema.FunctionModel
		if m.Functions {
			f, err := functionModel(m, comps)
			if err != nil {
				return err
			}
			fm = &f
		}
		if err := publishFunctions(ctx, tx, reg, v, m, fm); err != nil {
			return err
		}
		return reg.Publish(ctx, tx, v, m.Method == "gmm")
	})
	if err != nil {
		return err
	}
	e.logf("published %s: %s now shows it", v, schema.View(e.schema, name).Sanitize())
	return nil
}

func runPrune(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("prune", "assort prune NAME --keep N")
	keep := fs.Int("keep", 0, "ready versions to keep, newest first (the published version is always kept) (required)")
	wait := fs.Duration("wait", 0, "wait this long for another run of the same model to finish")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("prune takes one model name")
	}
	if *keep < 1 {
		return usagef("--keep must be at least 1, got %d", *keep)
	}
	name := fs.Arg(0)
	if err := schema.ValidateModelName(name); err != nil {
		return usagef("%v", err)
	}
	var pruned []int
	err := modelTx(ctx, e, "prune", name, *wait, func(tx pgx.Tx, reg schema.Registry) (err error) {
		pruned, err = reg.Prune(ctx, tx, name, *keep)
		return err
	})
	if err != nil {
		return err
	}
	if len(pruned) == 0 {
		e.logf("nothing to prune in %s", name)
	} else {
		e.logf("pruned %s versions %v", name, pruned)
	}
	return nil
}

func runDrop(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("drop", "assort drop NAME[@VERSION]")
	wait := fs.Duration("wait", 0, "wait this long for another run of the same model to finish")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("drop takes one model reference, NAME@VERSION, or NAME for the whole model")
	}
	name, version, err := schema.ParseRef(fs.Arg(0))
	if err != nil {
		return usagef("%v", err)
	}
	err = modelTx(ctx, e, "drop", name, *wait, func(tx pgx.Tx, reg schema.Registry) error {
		if version == 0 {
			return reg.DropModel(ctx, tx, name)
		}
		return reg.Drop(ctx, tx, schema.Version{Schema: e.schema, Model: name, N: version})
	})
	if err != nil {
		return err
	}
	e.logf("dropped %s", fs.Arg(0))
	return nil
}
