package dbio

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// copyHeader is the header of a binary COPY stream: the signature, no
// flags, no header extension.
const copyHeader = copySignature + "\x00\x00\x00\x00\x00\x00\x00\x00"

// copyFlushBytes is how much CopyIn lets an Encoder gather before handing
// it to the connection: large, so that the hand-over between goroutines
// is rare, and bounded, so that memory does not grow with the row count.
const copyFlushBytes = 1 << 20

// Encoder builds tuples of PostgreSQL's binary COPY format (see Decoder)
// by appending to one buffer. A row is Begin(n) followed by exactly n
// field calls; a field is in the binary format of its column's type.
// Misuse (too many or too few fields) panics.
type Encoder struct {
	buf  []byte
	rows int64
	want int // fields announced by the last Begin
	have int // fields written since
	cols int // fields every row must have; 0 for any number
}

// Begin starts a row of n fields.
func (e *Encoder) Begin(n int) {
	if e.have != e.want {
		panic(fmt.Sprintf("dbio: Encoder row %d has %d of its %d fields", e.rows, e.have, e.want))
	}
	if n < 0 || n > math.MaxInt16 {
		panic(fmt.Sprintf("dbio: Encoder row of %d fields", n))
	}
	if e.cols > 0 && n != e.cols {
		panic(fmt.Sprintf("dbio: Encoder row of %d fields, want %d", n, e.cols))
	}
	e.buf = binary.BigEndian.AppendUint16(e.buf, uint16(n))
	e.want, e.have = n, 0
	e.rows++
}

func (e *Encoder) field(n int) {
	if e.rows == 0 {
		panic("dbio: Encoder field before Begin")
	}
	if e.have == e.want {
		panic(fmt.Sprintf("dbio: Encoder row %d has more than its %d fields", e.rows, e.want))
	}
	e.have++
	e.buf = binary.BigEndian.AppendUint32(e.buf, uint32(int32(n)))
}

// Raw writes b as a field verbatim, such as a key kept from a Reader; nil
// writes NULL.
func (e *Encoder) Raw(b []byte) {
	if b == nil {
		e.Null()
		return
	}
	if len(b) > MaxFieldBytes {
		panic(fmt.Sprintf("dbio: Encoder field of %d bytes", len(b)))
	}
	e.field(len(b))
	e.buf = append(e.buf, b...)
}

// Null writes a NULL field.
func (e *Encoder) Null() { e.field(-1) }

// Int4 writes an integer field.
func (e *Encoder) Int4(v int32) {
	e.field(4)
	e.buf = binary.BigEndian.AppendUint32(e.buf, uint32(v))
}

// Int8 writes a bigint field.
func (e *Encoder) Int8(v int64) {
	e.field(8)
	e.buf = binary.BigEndian.AppendUint64(e.buf, uint64(v))
}

// Float8 writes a double precision field.
func (e *Encoder) Float8(v float64) {
	e.field(8)
	e.buf = binary.BigEndian.AppendUint64(e.buf, math.Float64bits(v))
}

// Text writes a text (or varchar) field: its binary format is the UTF-8
// bytes.
func (e *Encoder) Text(s string) {
	if len(s) > MaxFieldBytes {
		panic(fmt.Sprintf("dbio: Encoder field of %d bytes", len(s)))
	}
	e.field(len(s))
	e.buf = append(e.buf, s...)
}

// Rows is the number of rows begun.
func (e *Encoder) Rows() int64 { return e.rows }

// Len is the number of bytes gathered and not yet handed on.
func (e *Encoder) Len() int { return len(e.buf) }

// CopyMode is how CopyIn asks the server to store the rows.
type CopyMode int

const (
	// CopyPlain is an ordinary COPY FROM: the rows are stored as any
	// transaction's rows are, and a later VACUUM sets their hint bits,
	// marks their pages all-visible and in time freezes them.
	CopyPlain CopyMode = iota
	// CopyFrozen adds FREEZE: the rows are stored already frozen, on pages
	// marked all-visible (PostgreSQL 14 and later), so that a write-once
	// table never needs a VACUUM to freeze it, reads of it set no hint
	// bits, and index-only scans work at once. The server allows it only
	// for a table created or truncated earlier in the same transaction
	// (and not in a savepoint since), with no cursor open; it then fails
	// the COPY, naming the reason. Other sessions see the rows with the
	// commit, as they see the new table; the one departure from MVCC,
	// noted in PostgreSQL's documentation of COPY, is that a transaction
	// whose snapshot predates the commit also sees them if it reads the
	// new table, where it would otherwise find it empty.
	CopyFrozen
)

// CopyInSQL is the statement CopyIn runs:
//
//	COPY "schema"."table" ("c1", "c2") FROM STDIN (FORMAT binary)
//
// with ", FREEZE" after "binary" when mode is CopyFrozen.
func CopyInSQL(table pgx.Identifier, columns []string, mode CopyMode) string {
	var b strings.Builder
	b.WriteString("COPY ")
	b.WriteString(table.Sanitize())
	b.WriteString(" (")
	for i, c := range columns {
		if i > 0 {
			b.WriteString(", ")
		}
		b.WriteString(pgx.Identifier{c}.Sanitize())
	}
	b.WriteString(") FROM STDIN (FORMAT binary")
	if mode == CopyFrozen {
		b.WriteString(", FREEZE")
	}
	b.WriteString(")")
	return b.String()
}

// errProducerPanicked ends the COPY when next panics.
var errProducerPanicked = errors.New("row producer panicked")

// CopyIn streams rows into the columns of table with a binary COPY FROM
// STDIN and returns the number of rows the server stored. next appends one
// or more whole rows to e, each of len(columns) fields, and reports
// whether there are more; an error from next ends the COPY (the server
// stores nothing) and is returned. mode says whether the rows are stored
// frozen (see CopyFrozen for when the server allows it).
//
// next runs on the caller's goroutine, so that a panic in it reaches the
// caller (after the COPY has been failed and the connection freed);
// pgconn's CopyFrom sends from another goroutine, through an io.Pipe. Rows
// are handed over in pieces of about 1 MiB: memory does not grow with
// their number. Run CopyIn inside a transaction to make the rows appear
// together with the rest of a write.
func CopyIn(ctx context.Context, conn *pgconn.PgConn, table pgx.Identifier, columns []string, mode CopyMode, next func(e *Encoder) (more bool, err error)) (int64, error) {
	if len(columns) == 0 {
		panic("dbio: CopyIn with no columns")
	}
	sql := CopyInSQL(table, columns, mode)
	name := table.Sanitize()

	pr, pw := io.Pipe()
	type result struct {
		tag pgconn.CommandTag
		err error
	}
	res := make(chan result, 1)
	go func() {
		tag, err := conn.CopyFrom(ctx, pr, sql)
		// Unblock the producer if the COPY ended before reading all.
		pr.CloseWithError(errCopyEnded)
		res <- result{tag, err}
	}()

	produced := false
	defer func() {
		if !produced {
			// next panicked: end the COPY before passing the panic on.
			pw.CloseWithError(errProducerPanicked)
			<-res
		}
	}()
	e := &Encoder{buf: make([]byte, 0, copyFlushBytes+copyFlushBytes/4), cols: len(columns)}
	e.buf = append(e.buf, copyHeader...)
	var nextErr, writeErr error
	for {
		more, err := next(e)
		if err != nil {
			nextErr = err
			break
		}
		if e.have != e.want {
			panic(fmt.Sprintf("dbio: CopyIn row %d has %d of its %d fields", e.rows, e.have, e.want))
		}
		if !more {
			e.buf = binary.BigEndian.AppendUint16(e.buf, 0xffff) // trailer
		}
		if len(e.buf) >= copyFlushBytes || !more {
			if _, writeErr = pw.Write(e.buf); writeErr != nil {
				break
			}
			e.buf = e.buf[:0]
		}
		if !more {
			break
		}
	}
	produced = true
	if nextErr != nil {
		pw.CloseWithError(nextErr)
	} else {
		pw.Close()
	}
	r := <-res
	switch {
	case nextErr != nil:
		return 0, fmt.Errorf("copy into %s: %w", name, nextErr)
	case r.err != nil:
		return 0, fmt.Errorf("copy into %s: %w", name, queryError(sql, r.err))
	case writeErr != nil:
		return 0, fmt.Errorf("copy into %s: %w", name, writeErr)
	}
	return r.tag.RowsAffected(), nil
}

// errCopyEnded is what a producer's write meets once the COPY has ended;
// the COPY's own result says why.
var errCopyEnded = errors.New("copy ended")
