package dbio

import (
	"errors"
	"fmt"
	"testing"

	"github.com/jackc/pgx/v5/pgconn"
)

func TestRowError(t *testing.T) {
	cases := []struct {
		name string
		err  *RowError
		want string
		is   error
	}{
		{"null feature", &RowError{Row: 1042, Key: "98817", Column: "g_r", Err: ErrNull}, `row 1042 (key 98817): column "g_r": NULL`, ErrNull},
		{"nan without key", &RowError{Row: 3, Column: "x", Err: ErrNaN}, `row 3: column "x": NaN`, ErrNaN},
		{"null key", &RowError{Row: 7, Column: "id", Err: ErrNullKey}, `row 7: column "id": NULL key`, ErrNullKey},
		{"whole row", &RowError{Row: 9, Err: fmt.Errorf("%w: 3, want 4", ErrFieldRows)}, `row 9: wrong number of fields: 3, want 4`, ErrFieldRows},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := c.err.Error(); got != c.want {
				t.Errorf("Error() = %s, want %s", got, c.want)
			}
			wrapped := fmt.Errorf("read chunk 2: %w", c.err)
			if !errors.Is(wrapped, c.is) {
				t.Errorf("errors.Is(%v) = false", c.is)
			}
			var re *RowError
			if !errors.As(wrapped, &re) || re.Row != c.err.Row {
				t.Errorf("errors.As did not find the *RowError")
			}
		})
	}
}

func TestQueryError(t *testing.T) {
	cases := []struct {
		name string
		sql  string
		pe   pgconn.PgError
		want string
	}{
		{
			name: "one line",
			sql:  "SELECT a FORM t",
			pe:   pgconn.PgError{Severity: "ERROR", Code: "42601", Message: `syntax error at or near "FORM"`, Position: 10},
			want: "ERROR: syntax error at or near \"FORM\" (SQLSTATE 42601) at line 1, column 10:\n    SELECT a FORM t\n             ^",
		},
		{
			name: "second line with a tab and a hint",
			sql:  "SELECT a\n\tFROM nowhere",
			pe:   pgconn.PgError{Severity: "ERROR", Code: "42P01", Message: `relation "nowhere" does not exist`, Position: 16, Hint: "Check the name."},
			want: "ERROR: relation \"nowhere\" does not exist (SQLSTATE 42P01) at line 2, column 7:\n    \tFROM nowhere\n    \t     ^\nHINT: Check the name.",
		},
		{
			name: "characters, not bytes",
			sql:  "SELECT 'é' AS é, nope",
			pe:   pgconn.PgError{Severity: "ERROR", Code: "42703", Message: `column "nope" does not exist`, Position: 18},
			want: "ERROR: column \"nope\" does not exist (SQLSTATE 42703) at line 1, column 18:\n    SELECT 'é' AS é, nope\n                     ^",
		},
		{
			name: "end of input",
			sql:  "SELECT (1",
			pe:   pgconn.PgError{Severity: "ERROR", Code: "42601", Message: "syntax error at end of input", Position: 10},
			want: "ERROR: syntax error at end of input (SQLSTATE 42601) at line 1, column 10:\n    SELECT (1\n             ^",
		},
		{
			name: "no position",
			sql:  "SELECT 1/0",
			pe:   pgconn.PgError{Severity: "ERROR", Code: "22012", Message: "division by zero", Detail: "none"},
			want: "ERROR: division by zero (SQLSTATE 22012)\nDETAIL: none",
		},
		{
			name: "position past the end",
			sql:  "SELECT 1",
			pe:   pgconn.PgError{Severity: "ERROR", Code: "XX000", Message: "odd", Position: 40},
			want: "ERROR: odd (SQLSTATE XX000)",
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			pe := c.pe
			err := queryError(c.sql, fmt.Errorf("prepare: %w", &pe))
			if got := err.Error(); got != c.want {
				t.Errorf("Error() =\n%s\nwant\n%s", got, c.want)
			}
			var got *pgconn.PgError
			if !errors.As(err, &got) || got.Code != c.pe.Code {
				t.Errorf("errors.As did not find the *pgconn.PgError")
			}
		})
	}
	plain := errors.New("not a server error")
	if got := queryError("SELECT 1", plain); got != plain {
		t.Errorf("queryError changed a non-server error: %v", got)
	}
}
