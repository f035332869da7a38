package dbio

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
)

// Column describes one column of a query's result.
type Column struct {
	Name    string
	TypeOID uint32
	// TypeName is the type as format_type(oid, typmod) shows it, e.g.
	// "bigint", "character varying(20)", "uuid".
	TypeName string
	// Numeric is true for the types of pg_type.typcategory 'N' (smallint,
	// integer, bigint, real, double precision, numeric) that have a cast
	// to double precision, which is how features are read. Types such as
	// money and oid are of category 'N' but have no such cast, and are
	// not Numeric. A column of a domain type is described by its base
	// type, as the server reports it.
	Numeric bool
}

// typeInfoSQL looks up, for parallel arrays of type OIDs and modifiers,
// each type's display name and whether it is Numeric. (The server
// describes a column of a domain type by the domain's base type, so
// domains need no special care.)
const typeInfoSQL = `SELECT a.i, pg_catalog.format_type(a.oid, a.typmod),
	coalesce(t.typcategory = 'N' AND (a.oid = 'pg_catalog.float8'::pg_catalog.regtype
		OR EXISTS (SELECT 1 FROM pg_catalog.pg_cast c
			WHERE c.castsource = a.oid AND c.casttarget = 'pg_catalog.float8'::pg_catalog.regtype)), false)
FROM unnest($1::oid[], $2::int4[]) WITH ORDINALITY AS a(oid, typmod, i)
LEFT JOIN pg_catalog.pg_type t ON t.oid = a.oid
ORDER BY a.i`

// Describe asks the server for the result columns of the query sql
// without running it: sql is parsed and analysed as the unnamed prepared
// statement. A query the server rejects gives a *QueryError, which shows
// the server's message and the query's line with a caret under the
// position. A query with parameters ($1) or one that returns no columns is
// an error too.
func Describe(ctx context.Context, conn *pgx.Conn, sql string) ([]Column, error) {
	sd, err := conn.PgConn().Prepare(ctx, "", sql, nil)
	if err != nil {
		return nil, fmt.Errorf("describe query: %w", queryError(sql, err))
	}
	if len(sd.ParamOIDs) > 0 {
		return nil, fmt.Errorf("describe query: it has parameters ($1 to $%d); write the values into the query", len(sd.ParamOIDs))
	}
	if len(sd.Fields) == 0 {
		return nil, errors.New("describe query: it returns no columns; give a SELECT")
	}
	cols := make([]Column, len(sd.Fields))
	oids := make([]uint32, len(sd.Fields))
	mods := make([]int32, len(sd.Fields))
	for i, f := range sd.Fields {
		cols[i] = Column{Name: f.Name, TypeOID: f.DataTypeOID}
		oids[i] = f.DataTypeOID
		mods[i] = f.TypeModifier
	}
	rows, err := conn.Query(ctx, typeInfoSQL, oids, mods)
	if err != nil {
		return nil, fmt.Errorf("describe query: look up column types: %w", err)
	}
	defer rows.Close()
	n := 0
	for rows.Next() {
		var (
			i       int64
			name    string
			numeric bool
		)
		if err := rows.Scan(&i, &name, &numeric); err != nil {
			return nil, fmt.Errorf("describe query: look up column types: %w", err)
		}
		if i < 1 || int(i) > len(cols) {
			return nil, fmt.Errorf("describe query: look up column types: row for column %d of %d", i, len(cols))
		}
		cols[i-1].TypeName = name
		cols[i-1].Numeric = numeric
		n++
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("describe query: look up column types: %w", err)
	}
	if n != len(cols) {
		return nil, fmt.Errorf("describe query: look up column types: %d rows for %d columns", n, len(cols))
	}
	return cols, nil
}

// Resolve picks the key column and the feature columns from a query's
// columns. An empty features list means every column but the key. The
// errors name the column at fault: an unknown key or feature (listing the
// columns there are), a name the result holds more than once, a feature
// that is not Numeric (with its type), a feature listed twice, the key
// listed as a feature, and no features at all.
func Resolve(cols []Column, key string, features []string) (Column, []Column, error) {
	if key == "" {
		return Column{}, nil, errors.New("no key column given")
	}
	where := make(map[string][]int, len(cols))
	for i, c := range cols {
		where[c.Name] = append(where[c.Name], i)
	}
	find := func(role, name string) (Column, error) {
		at := where[name]
		switch len(at) {
		case 0:
			return Column{}, unknownColumn(cols, role, name)
		case 1:
			return cols[at[0]], nil
		}
		pos := make([]string, len(at))
		for j, i := range at {
			pos[j] = strconv.Itoa(i + 1)
		}
		return Column{}, fmt.Errorf("%s column %q appears %d times in the query result (columns %s); give each a distinct name with AS",
			role, name, len(at), strings.Join(pos, ", "))
	}
	k, err := find("key", key)
	if err != nil {
		return Column{}, nil, err
	}
	var fs []Column
	if len(features) == 0 {
		for _, c := range cols {
			if c.Name == key {
				continue
			}
			f, err := find("feature", c.Name)
			if err != nil {
				return Column{}, nil, err
			}
			fs = append(fs, f)
		}
		if len(fs) == 0 {
			return Column{}, nil, fmt.Errorf("no feature columns: the query returns only the key %q", key)
		}
	} else {
		seen := make(map[string]bool, len(features))
		for _, name := range features {
			if name == key {
				return Column{}, nil, fmt.Errorf("column %q is the key and cannot also be a feature", name)
			}
			if seen[name] {
				return Column{}, nil, fmt.Errorf("feature column %q is listed twice", name)
			}
			seen[name] = true
			f, err := find("feature", name)
			if err != nil {
				return Column{}, nil, err
			}
			fs = append(fs, f)
		}
	}
	for _, f := range fs {
		if !f.Numeric {
			return Column{}, nil, fmt.Errorf("feature column %q has type %s, which is not a number type that casts to double precision", f.Name, f.TypeName)
		}
	}
	return k, fs, nil
}

// unknownColumn is the error for a name not among cols, with the names
// there are and a hint when only the letter case differs.
func unknownColumn(cols []Column, role, name string) error {
	names := make([]string, len(cols))
	hint := ""
	for i, c := range cols {
		names[i] = c.Name
		if hint == "" && strings.EqualFold(c.Name, name) {
			hint = fmt.Sprintf(" (did you mean %q? names are case-sensitive)", c.Name)
		}
	}
	return fmt.Errorf("%s column %q is not in the query result%s; its columns are %s", role, name, hint, quoteNames(names))
}

// CopySQL wraps the query as a binary COPY that sends the key column as it
// is and every feature cast to float8:
//
//	COPY (SELECT q."key", q."f1"::float8, ... FROM (
//	<query>
//	) AS q) TO STDOUT (FORMAT binary)
//
// Trailing semicolons and white space are stripped from query; the line
// breaks around it keep a trailing "-- comment" from swallowing the rest.
// Every identifier is quoted.
func CopySQL(query string, key string, features []string) string {
	q := trimQuery(query)
	var b strings.Builder
	b.WriteString("COPY (SELECT q.")
	b.WriteString(pgx.Identifier{key}.Sanitize())
	for _, f := range features {
		b.WriteString(", q.")
		b.WriteString(pgx.Identifier{f}.Sanitize())
		b.WriteString("::float8")
	}
	b.WriteString(" FROM (\n")
	b.WriteString(q)
	b.WriteString("\n) AS q) TO STDOUT (FORMAT binary)")
	return b.String()
}

// CountSQL counts the rows of the user's query, wrapped like CopySQL.
func CountSQL(query string) string {
	return "SELECT count(*) FROM (\n" + trimQuery(query) + "\n) AS q"
}

// trimQuery strips the trailing semicolons and white space that would stop
// a query from being wrapped as a subquery.
func trimQuery(query string) string { return strings.TrimRight(query, "; \t\r\n\f\v") }
