package main

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio"
	"assort/fit"
	"assort/schema"
)

func runCompare(ctx context.Context, e *env, args []string) error {
	fs := e.flagSet("compare", "assort compare NAME[@VERSION] (--labels QUERY | --against NAME@VERSION) [--json]")
	labels := fs.String("labels", "", "query returning (key, label) of any types: compare the clusters with this labelling")
	against := fs.String("against", "", "another version of the same model, NAME@VERSION: compare the two over their common rows")
	asJSON := fs.Bool("json", false, "print JSON on stdout")
	if err := e.parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("compare takes one model reference, NAME or NAME@VERSION")
	}
	if (*labels == "") == (*against == "") {
		return usagef("give exactly one of --labels and --against")
	}
	name, version, err := schema.ParseRef(fs.Arg(0))
	if err != nil {
		return usagef("%v", err)
	}
	var otherVersion int
	if *against != "" {
		otherName, ov, err := schema.ParseRef(*against)
		if err != nil {
			return usagef("--against: %v", err)
		}
		if otherName != name || ov == 0 {
			return usagef("--against takes another version of the same model: %s@VERSION", name)
		}
		otherVersion = ov
	}
	conn, err := e.connect(ctx, "compare "+name)
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	if err := schema.Check(ctx, conn, e.schema); err != nil {
		return err
	}
	c, err := compare(ctx, conn, schema.Registry{Schema: e.schema}, name, version, *labels, otherVersion)
	if err != nil {
		return err
	}
	if *asJSON {
		return writeJSON(e.stdout, c)
	}
	return writeComparison(e.stdout, c)
}

// compare cross-tabulates a version's clusters with a labelling query or
// with another version, computes the agreement figures, and records them.
func compare(ctx context.Context, conn *pgx.Conn, reg schema.Registry, name string, version int, labels string, other int) (*schema.Comparison, error) {
	m, _, err := reg.Model(ctx, conn, name, version)
	if err != nil {
		return nil, err
	}
	if m.Status != "ready" {
		return nil, fmt.Errorf("%s@%d is %s; only a ready version can be compared", m.Name, m.Version, m.Status)
	}
	v := schema.Version{Schema: reg.Schema, Model: m.Name, N: m.Version}
	c := &schema.Comparison{Name: m.Name, Version: m.Version}

	// The user's labels query runs in a READ ONLY transaction, like a fit's.
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return nil, err
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	var sql string
	if labels != "" {
		c.LabelsQuery = &labels
		cols, err := describeLabels(ctx, conn, labels)
		if err != nil {
			return nil, err
		}
		var dup string
		err = tx.QueryRow(ctx, schema.LabelsDuplicateSQL(labels, cols[0].Name)).Scan(&dup)
		if err == nil {
			return nil, fmt.Errorf("labels query gives key %s more than once", dup)
		}
		if !errors.Is(err, pgx.ErrNoRows) {
			return nil, fmt.Errorf("labels: %w", err)
		}
		sql = schema.LabelsSQL(v, m.KeyColumn, labels, cols[0].Name, cols[1].Name)
	} else {
		om, _, err := reg.Model(ctx, conn, name, other)
		if err != nil {
			return nil, err
		}
		if om.Status != "ready" {
			return nil, fmt.Errorf("%s@%d is %s; only a ready version can be compared", om.Name, om.Version, om.Status)
		}
		c.AgainstVersion = &om.Version
		sql = schema.VersionsSQL(v, m.KeyColumn, schema.Version{Schema: reg.Schema, Model: name, N: other}, om.KeyColumn)
	}
	counts, err := crossTab(ctx, tx, sql)
	if err != nil {
		var pgErr *pgconn.PgError
		if errors.As(err, &pgErr) && pgErr.Code == "42883" {
			return nil, fmt.Errorf("the labels' key cannot be compared with %s's key %q (%s): %s; cast it in the labels query", v, m.KeyColumn, m.KeyType, pgErr.Message)
		}
		return nil, fmt.Errorf("cross-tabulate: %w", err)
	}
	if err := tx.Commit(ctx); err != nil {
		return nil, err
	}
	if err := agreement(c, counts, labels == ""); err != nil {
		return nil, err
	}
	wtx, err := conn.Begin(ctx)
	if err != nil {
		return nil, err
	}
	defer wtx.Rollback(context.WithoutCancel(ctx))
	if err := reg.RecordComparison(ctx, wtx, c); err != nil {
		return nil, err
	}
	return c, wtx.Commit(ctx)
}

// describeLabels describes a labels query and checks that it returns two
// columns.
func describeLabels(ctx context.Context, conn *pgx.Conn, labels string) ([]dbio.Column, error) {
	cols, err := dbio.Describe(ctx, conn, labels)
	if err != nil {
		return nil, fmt.Errorf("labels: %w", err)
	}
	if len(cols) != 2 {
		names := make([]string, len(cols))
		for i, col := range cols {
			names[i] = strconv.Quote(col.Name)
		}
		return nil, fmt.Errorf("labels query must return exactly two columns, the key and the label; it returns %d: %s", len(cols), strings.Join(names, ", "))
	}
	return cols, nil
}

// checkLabels rejects a bad labels query before a fit starts.
func checkLabels(ctx context.Context, conn *pgx.Conn, labels string) error {
	_, err := describeLabels(ctx, conn, labels)
	return err
}

// tally is one cell of a cross-tabulation; a nil side is a row present on
// the other side only.
type tally struct {
	cluster *int32
	label   *string
	rows    int64
}

func crossTab(ctx context.Context, tx pgx.Tx, sql string) ([]tally, error) {
	rows, err := tx.Query(ctx, sql)
	if err != nil {
		return nil, err
	}
	return pgx.CollectRows(rows, func(r pgx.CollectableRow) (tally, error) {
		var t tally
		err := r.Scan(&t.cluster, &t.label, &t.rows)
		return t, err
	})
}

// agreement fills c's counts, confusion matrix and agreement figures from
// the cross-tabulation. numericLabels orders labels as numbers (the other
// version's clusters).
func agreement(c *schema.Comparison, counts []tally, numericLabels bool) error {
	clusterIdx, labelIdx := map[int32]int{}, map[string]int{}
	for _, t := range counts {
		switch {
		case t.cluster != nil && t.label != nil:
			c.RowsCommon += t.rows
			clusterIdx[*t.cluster] = 0
			labelIdx[*t.label] = 0
		case t.cluster != nil:
			c.RowsModelOnly += t.rows
		default:
			c.RowsOtherOnly += t.rows
		}
	}
	if c.RowsCommon == 0 {
		other := "labelled rows"
		if numericLabels {
			other = "rows of the other version"
		}
		return fmt.Errorf("no key matches: %d rows of %s@%d and %d %s have no key in common", c.RowsModelOnly, c.Name, c.Version, c.RowsOtherOnly, other)
	}
	for k := range clusterIdx {
		c.Clusters = append(c.Clusters, int(k))
	}
	slices.Sort(c.Clusters)
	for l := range labelIdx {
		c.Labels = append(c.Labels, l)
	}
	slices.SortFunc(c.Labels, func(a, b string) int {
		if numericLabels {
			if n := cmp.Compare(len(a), len(b)); n != 0 {
				return n
			}
		}
		return strings.Compare(a, b)
	})
	for i, k := range c.Clusters {
		clusterIdx[int32(k)] = i
	}
	for j, l := range c.Labels {
		labelIdx[l] = j
	}
	t := fit.Contingency{Rows: len(c.Clusters), Cols: len(c.Labels), N: make([]int64, len(c.Clusters)*len(c.Labels))}
	for _, x := range counts {
		if x.cluster != nil && x.label != nil {
			t.N[clusterIdx[*x.cluster]*t.Cols+labelIdx[*x.label]] += x.rows
		}
	}
	acc, match := t.MatchedAccuracy()
	c.Accuracy, c.ARI, c.NMI = acc, t.AdjustedRand(), t.NormalizedMutualInfo()
	for i, k := range c.Clusters {
		for j, l := range c.Labels {
			if n := t.N[i*t.Cols+j]; n > 0 {
				c.Cells = append(c.Cells, schema.Cell{Cluster: k, Label: l, Rows: n, Matched: match[i] == j})
			}
		}
	}
	return nil
}

// writeComparison prints the figures and the confusion matrix, matched
// cells in brackets.
func writeComparison(w io.Writer, c *schema.Comparison) error {
	if c.LabelsQuery != nil {
		fmt.Fprintf(w, "%s@%d against the labels of: %s\n", c.Name, c.Version, oneLine(*c.LabelsQuery))
	} else {
		fmt.Fprintf(w, "%s@%d against %s@%d\n", c.Name, c.Version, c.Name, *c.AgainstVersion)
	}
	fmt.Fprintf(w, "  rows: %d in both, %d only in %s@%d, %d only on the other side\n", c.RowsCommon, c.RowsModelOnly, c.Name, c.Version, c.RowsOtherOnly)
	fmt.Fprintf(w, "  matched accuracy %.4f   adjusted Rand index %.4f   normalised mutual information %.4f\n\n", c.Accuracy, c.ARI, c.NMI)
	fmt.Fprintln(w, "confusion matrix (rows: clusters; columns: labels; [n]: matched pair)")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "cluster\t")
	for _, l := range c.Labels {
		fmt.Fprintf(tw, "%s\t", l)
	}
	fmt.Fprintln(tw)
	cell := map[[2]string]schema.Cell{}
	for _, x := range c.Cells {
		cell[[2]string{strconv.Itoa(x.Cluster), x.Label}] = x
	}
	for _, k := range c.Clusters {
		fmt.Fprintf(tw, "%d\t", k)
		for _, l := range c.Labels {
			x := cell[[2]string{strconv.Itoa(k), l}]
			if x.Matched {
				fmt.Fprintf(tw, "[%d]\t", x.Rows)
			} else {
				fmt.Fprintf(tw, "%d\t", x.Rows)
			}
		}
		fmt.Fprintln(tw)
	}
	return tw.Flush()
}
