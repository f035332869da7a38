package schema

import (
	"context"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"
)

// Staging tables hold a scoring run's rows until they are merged into the
// version's tables in the same transaction. They are temporary and dropped
// at commit, so a failed or killed run leaves nothing behind.
var (
	StagingResults     = pgx.Identifier{"assort_scored"}
	StagingMemberships = pgx.Identifier{"assort_scored_memberships"}
)

// StagingDDL creates the staging tables for v: like its result table, and
// like its memberships table when withMemberships.
func StagingDDL(v Version, withMemberships bool) []string {
	ddl := []string{fmt.Sprintf("CREATE TEMP TABLE %s (LIKE %s) ON COMMIT DROP", StagingResults.Sanitize(), v.Results().Sanitize())}
	if withMemberships {
		ddl = append(ddl, fmt.Sprintf("CREATE TEMP TABLE %s (LIKE %s) ON COMMIT DROP", StagingMemberships.Sanitize(), v.Memberships().Sanitize()))
	}
	return ddl
}

// StagingKeyDDL adds a primary key to the staging results, which fails,
// naming the key, when the scored rows repeat a key.
func StagingKeyDDL(key string) string {
	return fmt.Sprintf("ALTER TABLE %s ADD PRIMARY KEY (%s)", StagingResults.Sanitize(), pgx.Identifier{key}.Sanitize())
}

// MergeSQL merges the staged rows into v's tables: it inserts new keys and
// updates the rows whose results changed (upsert), replaces the
// memberships of every staged key, and analyses the tables.
func MergeSQL(v Version, key string, withMemberships bool) []string {
	res, k := v.Results().Sanitize(), pgx.Identifier{key}.Sanitize()
	sets := make([]string, len(ResultColumns))
	for i, c := range ResultColumns {
		sets[i] = fmt.Sprintf("%s = EXCLUDED.%s", c, c)
	}
	stmts := []string{fmt.Sprintf(`INSERT INTO %s AS r SELECT * FROM %s
ON CONFLICT (%s) DO UPDATE SET %s
WHERE (r.%s) IS DISTINCT FROM (EXCLUDED.%s)`, res, StagingResults.Sanitize(), k, strings.Join(sets, ", "),
		strings.Join(ResultColumns, ", r."), strings.Join(ResultColumns, ", EXCLUDED."))}
	if withMemberships {
		mem := v.Memberships().Sanitize()
		stmts = append(stmts,
			fmt.Sprintf("DELETE FROM %s m USING %s s WHERE m.%s = s.%s", mem, StagingResults.Sanitize(), k, k),
			fmt.Sprintf("INSERT INTO %s SELECT * FROM %s", mem, StagingMemberships.Sanitize()))
	}
	return append(stmts, AnalyzeSQL(v, withMemberships)...)
}

// TruncateSQL empties v's tables for a scoring that replaces their rows.
// TRUNCATE holds an exclusive lock on them until the transaction ends, and
// lets the rows that follow be written with COPY FREEZE.
func TruncateSQL(v Version, withMemberships bool) string {
	var names []string
	for _, t := range v.Tables(withMemberships) {
		names = append(names, t.Sanitize())
	}
	return "TRUNCATE " + strings.Join(names, ", ")
}

// AnalyzeSQL analyses v's tables after their rows changed.
func AnalyzeSQL(v Version, withMemberships bool) []string {
	var stmts []string
	for _, t := range v.Tables(withMemberships) {
		stmts = append(stmts, "ANALYZE "+t.Sanitize())
	}
	return stmts
}

// Scoring is one run of scoring rows with a stored version.
type Scoring struct {
	Mode                        string
	Query                       string
	RowsRead, RowsUsed, Skipped int64
}

// RecordScoring stores a scoring run of v.
func (r Registry) RecordScoring(ctx context.Context, tx pgx.Tx, v Version, s Scoring) error {
	_, err := tx.Exec(ctx, "INSERT INTO "+r.table("scorings")+
		" (name, version, mode, query, rows_read, rows_used, rows_skipped) VALUES ($1, $2, $3, $4, $5, $6, $7)",
		v.Model, v.N, s.Mode, s.Query, s.RowsRead, s.RowsUsed, s.Skipped)
	if err != nil {
		return fmt.Errorf("record scoring of %s: %w", v, err)
	}
	return nil
}
