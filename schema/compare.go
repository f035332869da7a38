package schema

import (
	"context"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"
)

// LabelsSQL cross-tabulates the result table of v (key column key) with a
// labelling: a query whose first column is the key and whose second is the
// label, of any type. It returns rows (cluster, label, rows) where cluster
// is NULL for labelled keys missing from the version and label is NULL for
// the version's rows without a label. Rows with a NULL label count as
// unlabelled; labels of a NULL key are left out.
func LabelsSQL(v Version, key, labels, keyCol, labelCol string) string {
	q := trimQuery(labels)
	lk, ll := pgx.Identifier{keyCol}.Sanitize(), pgx.Identifier{labelCol}.Sanitize()
	return fmt.Sprintf(`SELECT r.cluster, l.label, count(*)
FROM %s r
FULL JOIN (SELECT q.%s AS key, q.%s::text AS label FROM (%s
) AS q WHERE q.%s IS NOT NULL AND q.%s IS NOT NULL) l ON r.%s = l.key
GROUP BY 1, 2`, v.Results().Sanitize(), lk, ll, q, lk, ll, pgx.Identifier{key}.Sanitize())
}

// LabelsDuplicateSQL returns one key that the labels query gives more than
// once, if any.
func LabelsDuplicateSQL(labels, keyCol string) string {
	q := trimQuery(labels)
	k := pgx.Identifier{keyCol}.Sanitize()
	return fmt.Sprintf("SELECT q.%s::text FROM (%s\n) AS q WHERE q.%s IS NOT NULL GROUP BY q.%s HAVING count(*) > 1 LIMIT 1", k, q, k, k)
}

// VersionsSQL cross-tabulates two versions' results over their keys, with
// NULLs for rows present in only one of them.
func VersionsSQL(a Version, keyA string, b Version, keyB string) string {
	return fmt.Sprintf(`SELECT a.cluster, b.cluster::text, count(*)
FROM %s a FULL JOIN %s b ON a.%s = b.%s
GROUP BY 1, 2`, a.Results().Sanitize(), b.Results().Sanitize(), pgx.Identifier{keyA}.Sanitize(), pgx.Identifier{keyB}.Sanitize())
}

// Comparison is one row of the comparisons table with its cells.
type Comparison struct {
	ID             int64    `json:"id"`
	Name           string   `json:"name"`
	Version        int      `json:"version"`
	AgainstVersion *int     `json:"against_version,omitempty"`
	LabelsQuery    *string  `json:"labels_query,omitempty"`
	RowsCommon     int64    `json:"rows_common"`
	RowsModelOnly  int64    `json:"rows_model_only"`
	RowsOtherOnly  int64    `json:"rows_other_only"`
	Clusters       []int    `json:"clusters"`
	Labels         []string `json:"labels"`
	Accuracy       float64  `json:"accuracy"`
	ARI            float64  `json:"ari"`
	NMI            float64  `json:"nmi"`
	Cells          []Cell   `json:"cells"`
}

// Cell is one non-empty cell of a comparison's confusion matrix.
type Cell struct {
	Cluster int    `json:"cluster"`
	Label   string `json:"label"`
	Rows    int64  `json:"rows"`
	Matched bool   `json:"matched"`
}

// RecordComparison stores c and its cells and sets c.ID.
func (r Registry) RecordComparison(ctx context.Context, tx pgx.Tx, c *Comparison) error {
	err := tx.QueryRow(ctx, "INSERT INTO "+r.table("comparisons")+
		` (name, version, against_version, labels_query, rows_common, rows_model_only, rows_other_only, clusters, labels, accuracy, ari, nmi)
		 VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12) RETURNING id`,
		c.Name, c.Version, c.AgainstVersion, c.LabelsQuery, c.RowsCommon, c.RowsModelOnly, c.RowsOtherOnly,
		len(c.Clusters), len(c.Labels), c.Accuracy, c.ARI, c.NMI).Scan(&c.ID)
	if err != nil {
		return fmt.Errorf("record comparison of %s@%d: %w", c.Name, c.Version, err)
	}
	rows := make([][]any, len(c.Cells))
	for i, cell := range c.Cells {
		rows[i] = []any{c.ID, cell.Cluster, cell.Label, cell.Rows, cell.Matched}
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{r.Schema, "comparison_cells"},
		[]string{"comparison", "cluster", "label", "rows", "matched"}, pgx.CopyFromRows(rows)); err != nil {
		return fmt.Errorf("record comparison of %s@%d: %w", c.Name, c.Version, err)
	}
	return nil
}

// trimQuery strips the white space and trailing semicolons that would stop
// a user's query from being wrapped as a subquery.
func trimQuery(q string) string { return strings.TrimRight(strings.TrimSpace(q), "; \t\r\n\f\v") }
