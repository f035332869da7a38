package schema

import (
	"fmt"

	"github.com/jackc/pgx/v5"
)

// Result columns after the key, in order. Every version of every model has
// them all, so a stable view can move between versions and methods with
// CREATE OR REPLACE VIEW:
//
//	cluster      the row's cluster, 1..k
//	probability  the membership of that cluster (1 for k-means)
//	distance     to the cluster's centre in fitted units: Euclidean for
//	             k-means, Mahalanobis for mixtures
//	log_density  log of the mixture density at the row (mixtures only)
var ResultColumns = []string{"cluster", "probability", "distance", "log_density"}

// MembershipColumns follow the key in a memberships table.
var MembershipColumns = []string{"cluster", "probability"}

// CheckKeyColumn refuses a key column whose name would collide with a
// result column.
func CheckKeyColumn(key string) error {
	for _, c := range ResultColumns {
		if key == c {
			return fmt.Errorf("key column %q has the name of a result column; rename it in the query (SELECT %s AS %s_id, ...)", key, key, key)
		}
	}
	return nil
}

// ResultsDDL creates v's result table with the key in its original type.
// The primary key is added by ResultsKeyDDL after the rows are loaded,
// which is faster than maintaining the index row by row.
func ResultsDDL(v Version, key, keyType string) string {
	return fmt.Sprintf(`CREATE TABLE %s (
    %s %s NOT NULL,
    cluster integer NOT NULL,
    probability float8 NOT NULL,
    distance float8 NOT NULL,
    log_density float8
)`, v.Results().Sanitize(), pgx.Identifier{key}.Sanitize(), keyType)
}

// ResultsKeyDDL adds the primary key on the key column; it fails, naming a
// key value, when a key is duplicated.
func ResultsKeyDDL(v Version, key string) string {
	return fmt.Sprintf("ALTER TABLE %s ADD PRIMARY KEY (%s)", v.Results().Sanitize(), pgx.Identifier{key}.Sanitize())
}

// MembershipsDDL creates v's memberships table (long form: one row per row
// and component whose probability reaches the floor).
func MembershipsDDL(v Version, key, keyType string) string {
	return fmt.Sprintf(`CREATE TABLE %s (
    %s %s NOT NULL,
    cluster integer NOT NULL,
    probability float8 NOT NULL
)`, v.Memberships().Sanitize(), pgx.Identifier{key}.Sanitize(), keyType)
}

// MembershipsKeyDDL adds the memberships table's primary key.
func MembershipsKeyDDL(v Version, key string) string {
	return fmt.Sprintf("ALTER TABLE %s ADD PRIMARY KEY (%s, cluster)", v.Memberships().Sanitize(), pgx.Identifier{key}.Sanitize())
}

// CommentDDL describes a table for whoever finds it in a catalogue listing.
func CommentDDL(table pgx.Identifier, what string) string {
	return fmt.Sprintf("COMMENT ON TABLE %s IS %s", table.Sanitize(), quoteLiteral(what))
}

// ViewDDL points view at table.
func ViewDDL(view, table pgx.Identifier) string {
	return fmt.Sprintf("CREATE OR REPLACE VIEW %s AS SELECT * FROM %s", view.Sanitize(), table.Sanitize())
}

// quoteLiteral quotes s as an escape string literal, E'...', with quotes
// and backslashes doubled: correct whatever standard_conforming_strings
// says, since the text (feature names, for one) comes from the user.
func quoteLiteral(s string) string {
	out := []byte{'E', '\''}
	for i := 0; i < len(s); i++ {
		if s[i] == '\'' || s[i] == '\\' {
			out = append(out, s[i])
		}
		out = append(out, s[i])
	}
	return string(append(out, '\''))
}
