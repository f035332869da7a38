package dbio

import (
	"errors"
	"fmt"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5/pgconn"
)

// Causes of a *RowError, to be matched with errors.Is.
var (
	ErrNull      = errors.New("NULL")
	ErrNaN       = errors.New("NaN")
	ErrInf       = errors.New("infinite")
	ErrNullKey   = errors.New("NULL key")
	ErrBadValue  = errors.New("not a float8 value")
	ErrFieldRows = errors.New("wrong number of fields")
)

// RowError is a data error at a known row of a query result, in the manner
// of encoding/csv's ParseError. Its Error reads
//
//	row 1042 (key 98817): column "g_r": NULL
type RowError struct {
	// Row is the 1-based number of the row among the rows read, in the
	// order the server sent them (skipped rows included).
	Row int64
	// Key is the row's key rendered as text by RenderKey; "" when the key
	// is NULL or could not be known.
	Key string
	// Column is the name of the offending column; "" when the error is
	// about the row as a whole.
	Column string
	// Err is the cause: ErrNull, ErrNaN, ErrInf, ErrNullKey, or an error
	// wrapping ErrBadValue or ErrFieldRows.
	Err error
}

func (e *RowError) Error() string {
	var b strings.Builder
	b.WriteString("row ")
	b.WriteString(strconv.FormatInt(e.Row, 10))
	if e.Key != "" {
		b.WriteString(" (key ")
		b.WriteString(e.Key)
		b.WriteString(")")
	}
	if e.Column != "" {
		b.WriteString(": column ")
		b.WriteString(strconv.Quote(e.Column))
	}
	b.WriteString(": ")
	b.WriteString(e.Err.Error())
	return b.String()
}

func (e *RowError) Unwrap() error { return e.Err }

// QueryError is an error the server reported about a query, shown with the
// line of the query it points at. Its Error reads
//
//	ERROR: syntax error at or near "FORM" (SQLSTATE 42601) at line 2, column 10:
//	    FROM t FORM u
//	           ^
//
// errors.As finds the underlying *pgconn.PgError, whose Code is the
// SQLSTATE.
type QueryError struct {
	// SQL is the statement the server was given.
	SQL string
	// Err is the server's error.
	Err *pgconn.PgError
}

func (e *QueryError) Error() string {
	var b strings.Builder
	b.WriteString(e.Err.Error())
	line, col, text, ok := errorLine(e.SQL, int(e.Err.Position))
	if ok {
		fmt.Fprintf(&b, " at line %d, column %d:\n    %s\n    %s^", line, col, text, caretPad(text, col))
	}
	if e.Err.Detail != "" {
		b.WriteString("\nDETAIL: ")
		b.WriteString(e.Err.Detail)
	}
	if e.Err.Hint != "" {
		b.WriteString("\nHINT: ")
		b.WriteString(e.Err.Hint)
	}
	return b.String()
}

func (e *QueryError) Unwrap() error { return e.Err }

// queryError returns err as a *QueryError when it carries a server error,
// and err itself otherwise.
func queryError(sql string, err error) error {
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		return &QueryError{SQL: sql, Err: pe}
	}
	return err
}

// errorLine finds the line of sql that holds the pos'th character (1-based,
// counted in characters as the server counts them) and the 1-based column
// of that character on the line. ok is false when pos is outside sql.
func errorLine(sql string, pos int) (line, col int, text string, ok bool) {
	if pos < 1 {
		return 0, 0, "", false
	}
	line, col = 1, 0
	start := 0
	n := 0
	for i, r := range sql {
		n++
		if n == pos {
			col++
			end := strings.IndexByte(sql[i:], '\n')
			if end < 0 {
				end = len(sql)
			} else {
				end += i
			}
			return line, col, strings.TrimRight(sql[start:end], "\r"), true
		}
		if r == '\n' {
			line++
			col = 0
			start = i + 1
		} else {
			col++
		}
	}
	if n+1 == pos { // just past the end: the server points there on an unexpected end of input
		return line, col + 1, strings.TrimRight(sql[start:], "\r"), true
	}
	return 0, 0, "", false
}

// caretPad returns the blanks that put a caret under column col of text,
// keeping tabs so that the caret lines up however tabs are shown.
func caretPad(text string, col int) string {
	var b strings.Builder
	i := 1
	for _, r := range text {
		if i >= col {
			break
		}
		if r == '\t' {
			b.WriteByte('\t')
		} else {
			b.WriteByte(' ')
		}
		i++
	}
	for ; i < col; i++ {
		b.WriteByte(' ')
	}
	return b.String()
}

// quoteNames renders names as a comma-separated list of quoted strings,
// for messages.
func quoteNames(names []string) string {
	var b strings.Builder
	for i, n := range names {
		if i > 0 {
			b.WriteString(", ")
		}
		b.WriteString(strconv.Quote(n))
	}
	return b.String()
}
