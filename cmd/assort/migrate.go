package main

import (
	"context"
	"fmt"

	"assort/schema"
)

func runMigrate(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("migrate", "assort migrate [--print] [-d DB] [--schema S]")
	print := fs.Bool("print", false, "print the SQL for a DBA to review and apply by hand; change nothing")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return usagef("migrate takes no arguments, got %q", fs.Args())
	}
	if *print {
		_, err := fmt.Fprint(e.stdout, schema.Script(e.schema))
		return err
	}
	conn, err := e.connect(ctx, "migrate")
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	applied, err := schema.Migrate(ctx, conn, e.schema)
	if err != nil {
		return err
	}
	if len(applied) == 0 {
		e.logf("registry in schema %s is up to date (migration %d)", e.schema, schema.Latest())
	}
	for _, m := range applied {
		e.logf("applied %s in schema %s", m.Name, e.schema)
	}
	return nil
}
