package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strings"
	"text/tabwriter"

	"assort/schema"
)

func runModels(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("models", "assort models [NAME] [--json]")
	asJSON := fs.Bool("json", false, "print JSON on stdout")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 1 {
		return usagef("models takes at most one model name")
	}
	name := fs.Arg(0)
	if name != "" {
		if err := schema.ValidateModelName(name); err != nil {
			return usagef("%v", err)
		}
	}
	conn, err := e.connect(ctx, "models")
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	if err := schema.Check(ctx, conn, e.schema); err != nil {
		return err
	}
	ms, err := schema.Registry{Schema: e.schema}.Models(ctx, conn, name)
	if err != nil {
		return err
	}
	if *asJSON {
		return writeJSON(e.stdout, ms)
	}
	tw := tabwriter.NewWriter(e.stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "NAME\tVERSION\tSTATUS\tPUBLISHED\tMETHOD\tK\tROWS\tOBJECTIVE\tFINISHED")
	for _, m := range ms {
		pub := ""
		if m.Published {
			pub = "yes"
		}
		fin := "-"
		if m.FinishedAt != nil {
			fin = m.FinishedAt.UTC().Format("2006-01-02 15:04:05Z")
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%s\t%d\t%d\t%s\t%s\n", m.Name, m.Version, m.Status, pub, m.Method, m.K, m.RowsUsed, objective(m), fin)
	}
	return tw.Flush()
}

// objective is the figure a method minimises or maximises, for listings.
func objective(m *schema.Model) string {
	switch {
	case m.LogLikelihood != nil:
		return fmt.Sprintf("logL %.6g", *m.LogLikelihood)
	case m.Inertia != nil:
		return fmt.Sprintf("inertia %.6g", *m.Inertia)
	}
	return "-"
}

func runShow(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("show", "assort show NAME[@VERSION] [--json]")
	asJSON := fs.Bool("json", false, "print JSON on stdout")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("show takes one model reference, NAME or NAME@VERSION")
	}
	name, version, err := schema.ParseRef(fs.Arg(0))
	if err != nil {
		return usagef("%v", err)
	}
	conn, err := e.connect(ctx, "show")
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	if err := schema.Check(ctx, conn, e.schema); err != nil {
		return err
	}
	m, comps, err := schema.Registry{Schema: e.schema}.Model(ctx, conn, name, version)
	if err != nil {
		return err
	}
	criterion, cands, err := schema.Registry{Schema: e.schema}.Candidates(ctx, conn, m.Name, m.Version)
	if err != nil {
		return err
	}
	if *asJSON {
		return writeJSON(e.stdout, struct {
			*schema.Model
			Components []schema.Component
			Criterion  string             `json:",omitempty"`
			Candidates []schema.Candidate `json:",omitempty"`
		}{m, comps, criterion, cands})
	}
	if err := showModel(e.stdout, m, comps); err != nil {
		return err
	}
	if len(cands) > 1 {
		return writeCandidates(e.stdout, criterion, cands)
	}
	return nil
}

func showModel(w io.Writer, m *schema.Model, comps []schema.Component) error {
	pub := ""
	if m.Published {
		pub = ", published"
	}
	fmt.Fprintf(w, "%s@%d (%s%s)\n", m.Name, m.Version, m.Status, pub)
	fmt.Fprintf(w, "  method     %s, k=%d (%s)\n", m.Method, m.K, m.Algorithm)
	fmt.Fprintf(w, "  key        %s (%s)\n", m.KeyColumn, m.KeyType)
	fmt.Fprintf(w, "  features   %s; scale %s\n", strings.Join(m.Features, ", "), m.Scale)
	fmt.Fprintf(w, "  rows       %d used, %d read, %d skipped\n", m.RowsUsed, m.RowsRead, m.RowsSkipped)
	if m.Inertia != nil {
		fmt.Fprintf(w, "  inertia    %.10g\n", *m.Inertia)
	}
	if m.LogLikelihood != nil {
		fmt.Fprintf(w, "  logL       %.10g (p=%d, BIC %.10g, AIC %.10g)\n", *m.LogLikelihood, m.Params, *m.BIC, *m.AIC)
	}
	conv := "converged"
	if !m.Converged {
		conv = "not converged"
	}
	fmt.Fprintf(w, "  iterations %d, %s (%s); seed %d\n", m.Iterations, conv, m.StopReason, m.Seed)
	for _, ev := range m.Events {
		fmt.Fprintf(w, "  event      %s\n", ev)
	}
	fmt.Fprintf(w, "  results    %s\n", m.ResultTable)
	fmt.Fprintf(w, "  query      %s\n\n", oneLine(m.Query))
	return writeComponents(w, m.Features, comps)
}

// writeComponents prints one line per cluster: size, weight and centre, and
// for mixtures the standard deviations and correlations.
func writeComponents(w io.Writer, features []string, comps []schema.Component) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "cluster\tsize\tweight\t")
	for _, f := range features {
		fmt.Fprintf(tw, "%s\t", f)
	}
	fmt.Fprintln(tw)
	d := len(features)
	for _, c := range comps {
		fmt.Fprintf(tw, "%d\t%d\t%.4f\t", c.Cluster, c.Size, c.Weight)
		for _, v := range c.Center {
			fmt.Fprintf(tw, "%.4g\t", v)
		}
		fmt.Fprintln(tw)
		if len(c.Covariance) == d*d {
			fmt.Fprint(tw, "\t\tsd\t")
			for j := range d {
				fmt.Fprintf(tw, "%.4g\t", math.Sqrt(c.Covariance[j*d+j]))
			}
			fmt.Fprintln(tw)
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, c := range comps {
		if len(c.Covariance) != d*d || d < 2 {
			continue
		}
		fmt.Fprintf(w, "\ncorrelations in cluster %d:\n", c.Cluster)
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
		fmt.Fprint(tw, "\t")
		for _, f := range features {
			fmt.Fprintf(tw, "%s\t", f)
		}
		fmt.Fprintln(tw)
		for i := range d {
			fmt.Fprintf(tw, "%s\t", features[i])
			for j := range d {
				r := c.Covariance[i*d+j] / math.Sqrt(c.Covariance[i*d+i]*c.Covariance[j*d+j])
				fmt.Fprintf(tw, "%.3f\t", r)
			}
			fmt.Fprintln(tw)
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	return nil
}

func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}
