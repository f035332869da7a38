package dbio

import (
	"errors"
	"fmt"
	"slices"
	"testing"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio/dbtest"
)

func TestResolve(t *testing.T) {
	id := Column{Name: "id", TypeOID: oidInt8, TypeName: "bigint"}
	a := Column{Name: "a", TypeOID: oidFloat8, TypeName: "double precision", Numeric: true}
	b := Column{Name: "b", TypeOID: 1700, TypeName: "numeric(10,2)", Numeric: true}
	name := Column{Name: "name", TypeOID: oidText, TypeName: "text"}
	price := Column{Name: "price", TypeOID: 790, TypeName: "money"}
	upper := Column{Name: "G_R", TypeOID: oidFloat8, TypeName: "double precision", Numeric: true}
	cases := []struct {
		name     string
		cols     []Column
		key      string
		features []string
		wantKey  string
		want     []string
		wantErr  string
	}{
		{name: "all but the key", cols: []Column{a, id, b}, key: "id", wantKey: "id", want: []string{"a", "b"}},
		{name: "listed features in the given order", cols: []Column{id, a, b, name}, key: "id", features: []string{"b", "a"}, wantKey: "id", want: []string{"b", "a"}},
		{name: "text key", cols: []Column{name, a}, key: "name", wantKey: "name", want: []string{"a"}},
		{name: "no key given", cols: []Column{id, a}, key: "", wantErr: "no key column given"},
		{
			name: "unknown key", cols: []Column{id, a}, key: "idd",
			wantErr: `key column "idd" is not in the query result; its columns are "id", "a"`,
		},
		{
			name: "unknown feature with a case hint", cols: []Column{id, upper}, key: "id", features: []string{"g_r"},
			wantErr: `feature column "g_r" is not in the query result (did you mean "G_R"? names are case-sensitive); its columns are "id", "G_R"`,
		},
		{
			name: "text feature", cols: []Column{id, a, name}, key: "id",
			wantErr: `feature column "name" has type text, which is not a number type that casts to double precision`,
		},
		{
			name: "money feature", cols: []Column{id, price}, key: "id", features: []string{"price"},
			wantErr: `feature column "price" has type money, which is not a number type that casts to double precision`,
		},
		{
			name: "key among features", cols: []Column{id, a}, key: "id", features: []string{"a", "id"},
			wantErr: `column "id" is the key and cannot also be a feature`,
		},
		{
			name: "feature twice", cols: []Column{id, a}, key: "id", features: []string{"a", "a"},
			wantErr: `feature column "a" is listed twice`,
		},
		{
			name: "no features", cols: []Column{id}, key: "id",
			wantErr: `no feature columns: the query returns only the key "id"`,
		},
		{
			name: "duplicate key name", cols: []Column{id, a, id}, key: "id",
			wantErr: `key column "id" appears 2 times in the query result (columns 1, 3); give each a distinct name with AS`,
		},
		{
			name: "duplicate feature name", cols: []Column{id, a, b, a}, key: "id",
			wantErr: `feature column "a" appears 2 times in the query result (columns 2, 4); give each a distinct name with AS`,
		},
		{
			name: "duplicate name not used", cols: []Column{id, a, name, name}, key: "id", features: []string{"a"},
			wantKey: "id", want: []string{"a"},
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			k, fs, err := Resolve(c.cols, c.key, c.features)
			if c.wantErr != "" {
				if err == nil || err.Error() != c.wantErr {
					t.Fatalf("err = %v\nwant  %s", err, c.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if k.Name != c.wantKey {
				t.Errorf("key = %q, want %q", k.Name, c.wantKey)
			}
			var got []string
			for _, f := range fs {
				got = append(got, f.Name)
			}
			if !slices.Equal(got, c.want) {
				t.Errorf("features = %q, want %q", got, c.want)
			}
		})
	}
}

func TestCopySQL(t *testing.T) {
	cases := []struct {
		name     string
		query    string
		key      string
		features []string
		want     string
	}{
		{
			name:  "plain",
			query: "SELECT id, a, b FROM s.t",
			key:   "id", features: []string{"a", "b"},
			want: "COPY (SELECT q.\"id\", q.\"a\"::float8, q.\"b\"::float8 FROM (\nSELECT id, a, b FROM s.t\n) AS q) TO STDOUT (FORMAT binary)",
		},
		{
			name:  "semicolons and white space stripped",
			query: "  SELECT 1 AS k, 2 AS x ;\n ;\t\n",
			key:   "k", features: []string{"x"},
			want: "COPY (SELECT q.\"k\", q.\"x\"::float8 FROM (\n  SELECT 1 AS k, 2 AS x\n) AS q) TO STDOUT (FORMAT binary)",
		},
		{
			name:  "trailing comment kept on its line",
			query: "SELECT * FROM t -- all rows",
			key:   "id", features: []string{"v"},
			want: "COPY (SELECT q.\"id\", q.\"v\"::float8 FROM (\nSELECT * FROM t -- all rows\n) AS q) TO STDOUT (FORMAT binary)",
		},
		{
			name:  "identifiers quoted",
			query: "SELECT 1",
			key:   `Key "1"`, features: []string{"g r", "ä"},
			want: "COPY (SELECT q.\"Key \"\"1\"\"\", q.\"g r\"::float8, q.\"ä\"::float8 FROM (\nSELECT 1\n) AS q) TO STDOUT (FORMAT binary)",
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := CopySQL(c.query, c.key, c.features); got != c.want {
				t.Errorf("CopySQL =\n%s\nwant\n%s", got, c.want)
			}
		})
	}
}

// TestDescribe asks a real server for the columns of queries over obs.
func TestDescribe(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	makeObs(t, conn, schema, 3)
	obs := pgx.Identifier{schema, "obs"}.Sanitize()
	pos := pgx.Identifier{schema, "pos"}.Sanitize()
	mustExec(t, conn, "CREATE DOMAIN "+pos+" AS numeric CHECK (VALUE > 0)")
	mustExec(t, conn, "CREATE DOMAIN "+pgx.Identifier{schema, "pos2"}.Sanitize()+" AS "+pos)
	mustExec(t, conn, "CREATE DOMAIN "+pgx.Identifier{schema, "label"}.Sanitize()+" AS text")
	cases := []struct {
		name  string
		query string
		want  []Column
	}{
		{
			name:  "keys and features of obs",
			query: "SELECT id, name, tag, n, i, r, d, s, s::varchar(20) AS v, g::int2 AS h FROM " + obs,
			want: []Column{
				{"id", oidInt8, "bigint", true},
				{"name", oidText, "text", false},
				{"tag", oidUUID, "uuid", false},
				{"n", 1700, "numeric", true},
				{"i", oidInt4, "integer", true},
				{"r", 700, "real", true},
				{"d", oidFloat8, "double precision", true},
				{"s", oidText, "text", false},
				{"v", oidVarchar, "character varying(20)", false},
				{"h", oidInt2, "smallint", true},
			},
		},
		{
			// RowDescription gives a domain's base type, so domains show
			// as their base types.
			name:  "category N without a cast, and domains",
			query: fmt.Sprintf("SELECT 1::money AS m, 1::oid AS o, 1::%s AS p, 1::%s AS p2, 'x'::%s AS l, true AS b, 1.5::numeric(6,2) AS n", pos, pgx.Identifier{schema, "pos2"}.Sanitize(), pgx.Identifier{schema, "label"}.Sanitize()),
			want: []Column{
				{"m", 790, "money", false},
				{"o", 26, "oid", false},
				{"p", 1700, "numeric", true},
				{"p2", 1700, "numeric", true},
				{"l", oidText, "text", false},
				{"b", 16, "boolean", false},
				{"n", 1700, "numeric(6,2)", true},
			},
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cols, err := Describe(ctx, conn, c.query)
			if err != nil {
				t.Fatal(err)
			}
			if len(cols) != len(c.want) {
				t.Fatalf("%d columns, want %d: %+v", len(cols), len(c.want), cols)
			}
			for i, w := range c.want {
				got := cols[i]
				if got != w {
					t.Errorf("column %d = %+v, want %+v", i+1, got, w)
				}
			}
		})
	}
}

// TestDescribeErrors checks the errors for queries that cannot be read.
func TestDescribeErrors(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	makeObs(t, conn, schema, 3)
	obs := pgx.Identifier{schema, "obs"}.Sanitize()
	cases := []struct {
		name    string
		query   string
		wantErr string
		code    string
	}{
		{
			name:  "syntax error on the second line",
			query: "SELECT id,\n  n, FROM t",
			wantErr: "describe query: ERROR: syntax error at or near \"FROM\" (SQLSTATE 42601) at line 2, column 6:\n" +
				"      n, FROM t\n" +
				"         ^",
			code: "42601",
		},
		{
			name:  "unknown column",
			query: "SELECT id, nope FROM " + obs,
			wantErr: "describe query: ERROR: column \"nope\" does not exist (SQLSTATE 42703) at line 1, column 12:\n" +
				"    SELECT id, nope FROM " + obs + "\n" +
				"               ^\n" +
				"HINT: Perhaps you meant to reference the column \"obs.name\".",
			code: "42703",
		},
		{
			name:    "parameters",
			query:   "SELECT $1::int AS x, $2::text AS y",
			wantErr: "describe query: it has parameters ($1 to $2); write the values into the query",
		},
		{
			name:    "no columns",
			query:   "SELECT FROM " + obs,
			wantErr: "describe query: it returns no columns; give a SELECT",
		},
		{
			name:    "two statements",
			query:   "SELECT 1; SELECT 2",
			wantErr: "describe query: ERROR: cannot insert multiple commands into a prepared statement (SQLSTATE 42601)",
			code:    "42601",
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Describe(ctx, conn, c.query)
			if err == nil || err.Error() != c.wantErr {
				t.Fatalf("err = %v\nwant  %s", err, c.wantErr)
			}
			if c.code != "" {
				var pe *pgconn.PgError
				if !errors.As(err, &pe) || pe.Code != c.code {
					t.Errorf("no *pgconn.PgError with SQLSTATE %s", c.code)
				}
			}
		})
	}
	// Describe's columns feed Resolve, whose errors name the column.
	cols, err := Describe(ctx, conn, "SELECT id, name, d FROM "+obs)
	if err != nil {
		t.Fatal(err)
	}
	_, _, err = Resolve(cols, "id", []string{"d", "name"})
	const want = `feature column "name" has type text, which is not a number type that casts to double precision`
	if err == nil || err.Error() != want {
		t.Errorf("Resolve: err = %v, want %s", err, want)
	}
}
