package main

import (
	"context"
	"fmt"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/jackc/pgx/v5"

	"assort/dbio/localpg"
	"assort/schema"
)

const demoSchema = "lantern"

func runDemo(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("demo", "assort demo [--keep] [-d DB]")
	keep := fs.Bool("keep", false, "leave the throwaway server running after the demo, until interrupted, and say how to connect")
	catalogue := fs.String("catalogue-schema", demoSchema, "schema for the invented catalogue (dropped and re-created)")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return usagef("demo takes no arguments")
	}
	if e.db == "" {
		e.logf("starting a throwaway PostgreSQL server (not for real data)")
		srv, err := localpg.Start(ctx, localpg.Options{})
		if err != nil {
			return err
		}
		defer srv.Stop(context.WithoutCancel(ctx))
		e.db = srv.URL("postgres")
		if *keep {
			defer func() {
				fmt.Fprintf(e.stdout, "\nThe server keeps running until you press Ctrl-C. Connect with:\n  psql '%s'\n  assort show colours -d '%s'\n", e.db, e.db)
				<-ctx.Done()
			}()
		}
	} else if *keep {
		return usagef("--keep applies to the throwaway server; with --db the database is yours and stays as it is")
	}

	conn, err := e.connect(ctx, "demo")
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	if err := schema.ValidateSchemaName(*catalogue); err != nil {
		return usagef("--catalogue-schema: %v", err)
	}
	e.logf("loading %d invented sources into %s.sources", demoRows, *catalogue)
	if err := loadDemo(ctx, conn, *catalogue); err != nil {
		return err
	}
	if _, err := schema.Migrate(ctx, conn, e.schema); err != nil {
		return err
	}

	query := "SELECT source_id, g_r, r_i, i_z FROM " + *catalogue + ".sources WHERE r_mag < 21.5"
	fmt.Fprintf(e.stdout, "$ assort fit colours --query '%s' \\\n    --key source_id --method gmm --k 2:6 --seed 7\n", query)
	quiet := "--quiet=" + strconv.FormatBool(e.quiet)
	spec, err := parseFit(e, []string{"colours", "--query", query, "--key", "source_id", "--method", "gmm", "--k", "2:6", "--seed", "7",
		"-d", e.db, "--schema", e.schema, quiet})
	if err != nil {
		return err
	}
	res, err := fitJob(ctx, e, spec)
	if err != nil {
		return err
	}
	if err := report(e, false, res); err != nil {
		return err
	}

	join := `SELECT c.cluster, count(*) AS sources, round(avg(c.probability)::numeric, 3)::float8 AS mean_probability,
       count(*) FILTER (WHERE c.log_density < -2) AS poor_fits, round(avg(s.r_mag)::numeric, 2)::float8 AS mean_r_mag
FROM ` + *catalogue + `.sources s JOIN ` + pgx.Identifier{e.schema, "colours"}.Sanitize() + ` c USING (source_id)
GROUP BY 1 ORDER BY 1`
	fmt.Fprintf(e.stdout, "\nThe results join back to the catalogue with plain SQL:\n\n%s\n\n", indent(join))
	if err := printQuery(ctx, e, conn, join); err != nil {
		return err
	}

	labels := "SELECT source_id, population FROM " + *catalogue + ".sources"
	fmt.Fprintf(e.stdout, "\nThe demo knows the populations it invented, so the clusters can be checked:\n$ assort compare colours --labels '%s'\n\n", labels)
	c, err := compare(ctx, conn, schema.Registry{Schema: e.schema}, "colours", 0, labels, 0)
	if err != nil {
		return err
	}
	return writeComparison(e.stdout, c)
}

// printQuery runs sql and prints its rows as a table.
func printQuery(ctx context.Context, e *env, conn *pgx.Conn, sql string) error {
	rows, err := conn.Query(ctx, sql)
	if err != nil {
		return err
	}
	defer rows.Close()
	tw := tabwriter.NewWriter(e.stdout, 0, 0, 2, ' ', tabwriter.AlignRight)
	for _, f := range rows.FieldDescriptions() {
		fmt.Fprintf(tw, "%s\t", f.Name)
	}
	fmt.Fprintln(tw)
	for rows.Next() {
		vals, err := rows.Values()
		if err != nil {
			return err
		}
		for _, v := range vals {
			fmt.Fprintf(tw, "%v\t", v)
		}
		fmt.Fprintln(tw)
	}
	if err := rows.Err(); err != nil {
		return err
	}
	return tw.Flush()
}

func indent(s string) string { return "  " + strings.ReplaceAll(s, "\n", "\n  ") }
