package schema

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
)

// Model is one row of the registry's models table.
type Model struct {
	Name      string
	Version   int
	Status    string
	Method    string
	Algorithm string
	K         int
	Features  []string
	KeyColumn string
	KeyType   string
	Query     string
	Scale     string
	Center    []float64
	Spread    []float64

	RowsRead, RowsUsed, RowsSkipped int64
	Inertia                         *float64
	Iterations                      int
	Converged                       bool
	StopReason                      string

	Seed            int64
	Restarts        int
	MaxIter         int
	Tol             float64
	ResultTable     string
	RunBy           string
	StartedAt       time.Time
	FinishedAt      *time.Time
	ToolVersion     string
	Published       bool // the stable views show this version
	PublishedAt     *time.Time
	PublishedBy     string
	Covariance      string
	LogLikelihood   *float64
	BIC, AIC        *float64
	Params          int
	Reg             float64
	MembershipFloor float64
	Events          []string

	Functions bool // the version has SQL scoring functions

	RenumberedAgainst *int     // published version the clusters were matched to
	RenumberBasis     string   // "centres"
	RenumberCost      *float64 // total cost of the matching
}

// Component is one row of the registry's components table.
type Component struct {
	Cluster    int
	Size       int64
	Weight     float64
	Center     []float64 // original units
	Covariance []float64 // d×d row-major, original units; nil for k-means

	// The same parameters in the units the fit used, after scaling:
	// scoring uses these, so that it repeats the fit's arithmetic exactly.
	FittedCenter     []float64
	FittedCovariance []float64

	// Renumbering against the previously published version.
	FittedOrder    int      // the number by descending size, before renumbering
	MatchedCluster *int     // the counterpart's number, nil when none
	MatchCost      *float64 // cost of the pair
}

// Registry is the set of registry tables in one schema.
type Registry struct{ Schema string }

func (r Registry) table(name string) string { return pgx.Identifier{r.Schema, name}.Sanitize() }

// lockKey is the session advisory lock that one run of a model holds from
// start to end, so that runs of one name never interleave.
func (r Registry) lockKey(model string) string { return "assort model " + r.Schema + "." + model }

// TryLock takes the model's advisory lock on conn without waiting. It
// reports false when another session holds it.
func (r Registry) TryLock(ctx context.Context, conn *pgx.Conn, model string) (bool, error) {
	var ok bool
	err := conn.QueryRow(ctx, "SELECT pg_try_advisory_lock(hashtextextended($1, 0))", r.lockKey(model)).Scan(&ok)
	if err != nil {
		return false, fmt.Errorf("lock model %s: %w", model, err)
	}
	return ok, nil
}

// Unlock releases the model's advisory lock taken by TryLock.
func (r Registry) Unlock(ctx context.Context, conn *pgx.Conn, model string) error {
	_, err := conn.Exec(ctx, "SELECT pg_advisory_unlock(hashtextextended($1, 0))", r.lockKey(model))
	return err
}

// Recover marks as failed every version of model still reading 'running'.
// The caller must hold the model's lock: then no live run owns such a row,
// so its run was killed. It returns the versions it marked.
func (r Registry) Recover(ctx context.Context, q Querier, model string) ([]int, error) {
	rows, err := q.Query(ctx, "UPDATE "+r.table("models")+
		" SET status = 'failed', finished_at = clock_timestamp(), stop_reason = 'run ended without finishing'"+
		" WHERE name = $1 AND status = 'running' RETURNING version", model)
	if err != nil {
		return nil, fmt.Errorf("recover %s: %w", model, err)
	}
	vs, err := pgx.CollectRows(rows, pgx.RowTo[int])
	if err != nil {
		return nil, fmt.Errorf("recover %s: %w", model, err)
	}
	return vs, nil
}

// Reserve records the start of a run: it takes the next version number of
// m.Name (one above every version in the registry and every dropped one,
// so a number is never given twice while the name lives), inserts m with
// status 'running' and sets m.Version. Call it in its own short
// transaction (or autocommit) so that a DBA sees the run.
func (r Registry) Reserve(ctx context.Context, q Querier, m *Model) error {
	err := q.QueryRow(ctx, "INSERT INTO "+r.table("models")+
		` (name, version, status, method, k, features, key_column, key_type, query, scale,
		   seed, restarts, max_iter, tol, covariance, reg, membership_floor, backend_pid, tool_version)
		 SELECT $1, greatest(coalesce(max(version), 0), coalesce((SELECT last_version FROM `+r.table("retired_versions")+` WHERE name = $1), 0)) + 1,
		   'running', $2, $3, $4, $5, $6, $7, $8,
		   $9, $10, $11, $12, $13, $14, $15, pg_backend_pid(), $16
		 FROM `+r.table("models")+` WHERE name = $1
		 RETURNING version, started_at`,
		m.Name, m.Method, m.K, m.Features, m.KeyColumn, m.KeyType, m.Query, m.Scale,
		m.Seed, m.Restarts, m.MaxIter, m.Tol, nullText(m.Covariance), nullZero(m.Reg, m.Method == "gmm"),
		nullZero(m.MembershipFloor, m.Method == "gmm"), m.ToolVersion).Scan(&m.Version, &m.StartedAt)
	if err != nil {
		return fmt.Errorf("reserve a version of %s: %w", m.Name, err)
	}
	m.Status = "running"
	return nil
}

// Abandon deletes the registry row of a run that failed while alive, so
// that a failed run leaves nothing behind.
func (r Registry) Abandon(ctx context.Context, q Querier, name string, version int) error {
	_, err := q.Exec(ctx, "DELETE FROM "+r.table("models")+" WHERE name = $1 AND version = $2 AND status = 'running'", name, version)
	return err
}

// Finish records the fitted model and its components and marks the version
// ready. Run it in the transaction that creates the result tables.
func (r Registry) Finish(ctx context.Context, tx pgx.Tx, m *Model, comps []Component) error {
	tag, err := tx.Exec(ctx, "UPDATE "+r.table("models")+` SET
		status = 'ready', algorithm = $3, center = $4, spread = $5,
		rows_read = $6, rows_used = $7, rows_skipped = $8, inertia = $9,
		iterations = $10, converged = $11, stop_reason = $12, result_table = $13,
		log_likelihood = $14, bic = $15, aic = $16, params = $17, events = $18,
		k = $19, renumbered_against = $20, renumber_basis = $21, renumber_cost = $22, functions = $23,
		finished_at = clock_timestamp()
		WHERE name = $1 AND version = $2 AND status = 'running'`,
		m.Name, m.Version, m.Algorithm, m.Center, m.Spread,
		m.RowsRead, m.RowsUsed, m.RowsSkipped, m.Inertia,
		m.Iterations, m.Converged, m.StopReason, m.ResultTable,
		m.LogLikelihood, m.BIC, m.AIC, nullZero(float64(m.Params), m.Method == "gmm"), m.Events, m.K,
		m.RenumberedAgainst, nullText(m.RenumberBasis), m.RenumberCost, m.Functions)
	if err != nil {
		return fmt.Errorf("record %s@%d: %w", m.Name, m.Version, err)
	}
	if tag.RowsAffected() != 1 {
		return fmt.Errorf("record %s@%d: its registry row is no longer 'running'", m.Name, m.Version)
	}
	rows := make([][]any, len(comps))
	for i, c := range comps {
		var cov, fcov any
		if c.Covariance != nil {
			cov, fcov = c.Covariance, c.FittedCovariance
		}
		order := c.FittedOrder
		if order == 0 {
			order = c.Cluster
		}
		rows[i] = []any{m.Name, m.Version, c.Cluster, c.Size, c.Weight, c.Center, c.FittedCenter, cov, fcov, order, c.MatchedCluster, c.MatchCost}
	}
	_, err = tx.CopyFrom(ctx, pgx.Identifier{r.Schema, "components"},
		[]string{"name", "version", "cluster", "size", "weight", "center", "fitted_center", "covariance", "fitted_covariance",
			"fitted_order", "matched_cluster", "match_cost"}, pgx.CopyFromRows(rows))
	if err != nil {
		return fmt.Errorf("record components of %s@%d: %w", m.Name, m.Version, err)
	}
	m.Status = "ready"
	return nil
}

// Publish points the stable views of v's model at version v and records who
// did it and when. It runs in tx, so the switch is atomic. withMemberships
// says whether the version has a memberships table.
func (r Registry) Publish(ctx context.Context, tx pgx.Tx, v Version, withMemberships bool) error {
	var status string
	err := tx.QueryRow(ctx, "SELECT status FROM "+r.table("models")+" WHERE name = $1 AND version = $2 FOR UPDATE", v.Model, v.N).Scan(&status)
	if errors.Is(err, pgx.ErrNoRows) {
		return fmt.Errorf("publish %s: no such version", v)
	}
	if err != nil {
		return fmt.Errorf("publish %s: %w", v, err)
	}
	if status != "ready" {
		return fmt.Errorf("publish %s: the version is %s, only a ready version can be published", v, status)
	}
	// CREATE OR REPLACE VIEW keeps the views' grants but cannot change a
	// column's name or type: when the key changed since the version shown
	// now, the views are dropped first (without CASCADE: a view of yours
	// on them makes the publish fail, naming it).
	var keyChanged bool
	err = tx.QueryRow(ctx, "SELECT (p.key_column, p.key_type) IS DISTINCT FROM (m.key_column, m.key_type) FROM "+r.table("models")+" m, "+
		r.table("models")+" p WHERE m.name = $1 AND m.version = $2 AND p.name = $1 AND p.version = ("+r.publishedSQL("$1")+")",
		v.Model, v.N).Scan(&keyChanged)
	if err != nil && !errors.Is(err, pgx.ErrNoRows) {
		return fmt.Errorf("publish %s: %w", v, err)
	}
	if keyChanged {
		for _, view := range []pgx.Identifier{MembershipsView(v.Schema, v.Model), View(v.Schema, v.Model)} {
			if _, err := tx.Exec(ctx, "DROP VIEW IF EXISTS "+view.Sanitize()); err != nil {
				return fmt.Errorf("publish %s: the key changed, so %s must be re-created: %w", v, view.Sanitize(), err)
			}
		}
	}
	if _, err := tx.Exec(ctx, ViewDDL(View(v.Schema, v.Model), v.Results())); err != nil {
		return fmt.Errorf("publish %s: view: %w", v, err)
	}
	mv := MembershipsView(v.Schema, v.Model)
	if withMemberships {
		if _, err := tx.Exec(ctx, ViewDDL(mv, v.Memberships())); err != nil {
			return fmt.Errorf("publish %s: memberships view: %w", v, err)
		}
	} else if _, err := tx.Exec(ctx, "DROP VIEW IF EXISTS "+mv.Sanitize()); err != nil {
		return fmt.Errorf("publish %s: memberships view: %w", v, err)
	}
	if _, err := tx.Exec(ctx, "INSERT INTO "+r.table("publications")+" (name, version) VALUES ($1, $2)", v.Model, v.N); err != nil {
		return fmt.Errorf("publish %s: %w", v, err)
	}
	return nil
}

const modelColumns = `m.name, m.version, m.status, m.method, coalesce(m.algorithm, ''), m.k, m.features,
	m.key_column, m.key_type, m.query, m.scale, coalesce(m.center, '{}'), coalesce(m.spread, '{}'),
	coalesce(m.rows_read, 0), coalesce(m.rows_used, 0), coalesce(m.rows_skipped, 0), m.inertia,
	coalesce(m.iterations, 0), coalesce(m.converged, false), coalesce(m.stop_reason, ''),
	m.seed, m.restarts, m.max_iter, m.tol, coalesce(m.result_table, ''), m.run_by,
	m.started_at, m.finished_at, m.tool_version,
	p.version IS NOT DISTINCT FROM m.version, p.published_at, coalesce(p.published_by, ''),
	coalesce(m.covariance, ''), m.log_likelihood, m.bic, m.aic, coalesce(m.params, 0),
	coalesce(m.reg, 0), coalesce(m.membership_floor, 0), coalesce(m.events, '{}'),
	m.renumbered_against, coalesce(m.renumber_basis, ''), m.renumber_cost, m.functions`

func (r Registry) modelsFrom() string {
	return " FROM " + r.table("models") + " m LEFT JOIN LATERAL (SELECT version, published_at, published_by FROM " +
		r.table("publications") + " WHERE name = m.name" + newestPublication + ") p ON true"
}

func scanModel(row pgx.Row) (*Model, error) {
	var m Model
	var pubAt *time.Time
	err := row.Scan(&m.Name, &m.Version, &m.Status, &m.Method, &m.Algorithm, &m.K, &m.Features,
		&m.KeyColumn, &m.KeyType, &m.Query, &m.Scale, &m.Center, &m.Spread,
		&m.RowsRead, &m.RowsUsed, &m.RowsSkipped, &m.Inertia,
		&m.Iterations, &m.Converged, &m.StopReason,
		&m.Seed, &m.Restarts, &m.MaxIter, &m.Tol, &m.ResultTable, &m.RunBy,
		&m.StartedAt, &m.FinishedAt, &m.ToolVersion,
		&m.Published, &pubAt, &m.PublishedBy,
		&m.Covariance, &m.LogLikelihood, &m.BIC, &m.AIC, &m.Params,
		&m.Reg, &m.MembershipFloor, &m.Events,
		&m.RenumberedAgainst, &m.RenumberBasis, &m.RenumberCost, &m.Functions)
	if err != nil {
		return nil, err
	}
	if m.Published {
		m.PublishedAt = pubAt
	} else {
		m.PublishedBy = ""
	}
	return &m, nil
}

// Models lists every version of every model (or of one model when name is
// not empty), by name and version.
func (r Registry) Models(ctx context.Context, q Querier, name string) ([]*Model, error) {
	sql := "SELECT " + modelColumns + r.modelsFrom()
	var args []any
	if name != "" {
		sql += " WHERE m.name = $1"
		args = append(args, name)
	}
	rows, err := q.Query(ctx, sql+" ORDER BY m.name, m.version", args...)
	if err != nil {
		return nil, fmt.Errorf("list models: %w", err)
	}
	defer rows.Close()
	var ms []*Model
	for rows.Next() {
		m, err := scanModel(rows)
		if err != nil {
			return nil, fmt.Errorf("list models: %w", err)
		}
		ms = append(ms, m)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("list models: %w", err)
	}
	return ms, nil
}

// ErrNoModel says a model or version does not exist.
var ErrNoModel = errors.New("no such model")

// Model reads one version of a model with its components; version 0 means
// the published version.
func (r Registry) Model(ctx context.Context, q Querier, name string, version int) (*Model, []Component, error) {
	sql := "SELECT " + modelColumns + r.modelsFrom() + " WHERE m.name = $1 AND "
	if version == 0 {
		sql += "m.version = p.version"
	} else {
		sql += "m.version = $2"
	}
	args := []any{name}
	if version != 0 {
		args = append(args, version)
	}
	m, err := scanModel(q.QueryRow(ctx, sql, args...))
	if errors.Is(err, pgx.ErrNoRows) {
		if version == 0 {
			return nil, nil, fmt.Errorf("%w: %s has no published version", ErrNoModel, name)
		}
		return nil, nil, fmt.Errorf("%w: %s@%d", ErrNoModel, name, version)
	}
	if err != nil {
		return nil, nil, fmt.Errorf("read model %s: %w", name, err)
	}
	rows, err := q.Query(ctx, "SELECT cluster, size, weight, center, covariance, fitted_center, fitted_covariance, coalesce(fitted_order, cluster), matched_cluster, match_cost FROM "+r.table("components")+
		" WHERE name = $1 AND version = $2 ORDER BY cluster", m.Name, m.Version)
	if err != nil {
		return nil, nil, fmt.Errorf("read components of %s@%d: %w", m.Name, m.Version, err)
	}
	comps, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (Component, error) {
		var c Component
		err := row.Scan(&c.Cluster, &c.Size, &c.Weight, &c.Center, &c.Covariance, &c.FittedCenter, &c.FittedCovariance,
			&c.FittedOrder, &c.MatchedCluster, &c.MatchCost)
		return c, err
	})
	if err != nil {
		return nil, nil, fmt.Errorf("read components of %s@%d: %w", m.Name, m.Version, err)
	}
	return m, comps, nil
}

func nullText(s string) any {
	if s == "" {
		return nil
	}
	return s
}

// nullZero is v when keep, else SQL NULL.
func nullZero(v float64, keep bool) any {
	if !keep {
		return nil
	}
	return v
}

// CheckFree makes sure the stable views of model can be created: a
// relation of that name must be absent, or a view of a model the registry
// knows.
func (r Registry) CheckFree(ctx context.Context, q Querier, model string) error {
	for _, id := range []pgx.Identifier{View(r.Schema, model), MembershipsView(r.Schema, model)} {
		var kind string
		var known bool
		err := q.QueryRow(ctx, `SELECT c.relkind::text, EXISTS (SELECT 1 FROM `+r.table("models")+` WHERE name = $3)
			FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
			WHERE n.nspname = $1 AND c.relname = $2`, id[0], id[1], model).Scan(&kind, &known)
		if errors.Is(err, pgx.ErrNoRows) {
			continue
		}
		if err != nil {
			return fmt.Errorf("check name %s: %w", model, err)
		}
		if kind != "v" {
			return fmt.Errorf("model name %q: %s already exists and is not a view; choose another name or schema", model, id.Sanitize())
		}
		if !known {
			return fmt.Errorf("model name %q: view %s exists but the registry has no model of that name; choose another name or schema", model, id.Sanitize())
		}
	}
	return nil
}
