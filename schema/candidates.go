package schema

import (
	"context"
	"fmt"

	"github.com/jackc/pgx/v5"
)

// Candidate is one k tried for a version, with its criteria; nil where a
// criterion does not apply.
type Candidate struct {
	K             int      `json:"k"`
	Inertia       *float64 `json:"inertia"`
	LogLikelihood *float64 `json:"log_likelihood"`
	Params        int      `json:"params"`
	BIC           *float64 `json:"bic"`
	AIC           *float64 `json:"aic"`
	ICL           *float64 `json:"icl"`
	Silhouette    *float64 `json:"silhouette"`
	Iterations    int      `json:"iterations"`
	Converged     bool     `json:"converged"`
	Chosen        bool     `json:"chosen"`
}

// Criterion returns the candidate's value of a criterion (bic, aic, icl,
// silhouette or inertia), nil where it does not apply.
func (c Candidate) Criterion(name string) *float64 {
	switch name {
	case "bic":
		return c.BIC
	case "aic":
		return c.AIC
	case "icl":
		return c.ICL
	case "silhouette":
		return c.Silhouette
	case "inertia":
		return c.Inertia
	}
	return nil
}

// RecordCandidates stores the candidates of m's version and the criterion
// that chose among them. Run it in the version's write transaction.
func (r Registry) RecordCandidates(ctx context.Context, tx pgx.Tx, m *Model, criterion string, cs []Candidate) error {
	ks := make([]int32, len(cs))
	rows := make([][]any, len(cs))
	for i, c := range cs {
		ks[i] = int32(c.K)
		rows[i] = []any{m.Name, m.Version, c.K, c.Inertia, c.LogLikelihood, c.Params, c.BIC, c.AIC, c.ICL, c.Silhouette, c.Iterations, c.Converged, c.Chosen}
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{r.Schema, "candidates"},
		[]string{"name", "version", "k", "inertia", "log_likelihood", "params", "bic", "aic", "icl", "silhouette", "iterations", "converged", "chosen"},
		pgx.CopyFromRows(rows)); err != nil {
		return fmt.Errorf("record candidates of %s@%d: %w", m.Name, m.Version, err)
	}
	if _, err := tx.Exec(ctx, "UPDATE "+r.table("models")+" SET criterion = $3, candidates = $4 WHERE name = $1 AND version = $2",
		m.Name, m.Version, criterion, ks); err != nil {
		return fmt.Errorf("record candidates of %s@%d: %w", m.Name, m.Version, err)
	}
	return nil
}

// Candidates reads the candidates of a version, by k, and the criterion.
func (r Registry) Candidates(ctx context.Context, q Querier, name string, version int) (string, []Candidate, error) {
	var criterion *string
	if err := q.QueryRow(ctx, "SELECT criterion FROM "+r.table("models")+" WHERE name = $1 AND version = $2", name, version).Scan(&criterion); err != nil {
		return "", nil, fmt.Errorf("read candidates of %s@%d: %w", name, version, err)
	}
	rows, err := q.Query(ctx, "SELECT k, inertia, log_likelihood, params, bic, aic, icl, silhouette, iterations, converged, chosen FROM "+
		r.table("candidates")+" WHERE name = $1 AND version = $2 ORDER BY k", name, version)
	if err != nil {
		return "", nil, fmt.Errorf("read candidates of %s@%d: %w", name, version, err)
	}
	cs, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (Candidate, error) {
		var c Candidate
		err := row.Scan(&c.K, &c.Inertia, &c.LogLikelihood, &c.Params, &c.BIC, &c.AIC, &c.ICL, &c.Silhouette, &c.Iterations, &c.Converged, &c.Chosen)
		return c, err
	})
	if err != nil {
		return "", nil, fmt.Errorf("read candidates of %s@%d: %w", name, version, err)
	}
	c := ""
	if criterion != nil {
		c = *criterion
	}
	return c, cs, nil
}
