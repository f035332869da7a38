package dbio

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio/dbtest"
)

// TestEncoder checks the Encoder's bytes against the format as the
// Decoder reads it, built by hand in decoder_test.go.
func TestEncoder(t *testing.T) {
	var e Encoder
	e.Begin(6)
	e.Raw([]byte("key"))
	e.Null()
	e.Int4(-7)
	e.Int8(1 << 40)
	e.Float8(math.Pi)
	e.Text("é")
	e.Begin(2)
	e.Raw(nil)
	e.Raw([]byte{})
	want := cat(
		tup([]byte("key"), nil, be32(-7), be64(1<<40), be64(math.Float64bits(math.Pi)), []byte("é")),
		tup(nil, []byte{}),
	)
	if !bytes.Equal(e.buf, want) {
		t.Errorf("bytes =\n%q\nwant\n%q", e.buf, want)
	}
	if e.Rows() != 2 || e.Len() != len(want) {
		t.Errorf("Rows, Len = %d, %d; want 2, %d", e.Rows(), e.Len(), len(want))
	}
}

func TestEncoderMisuse(t *testing.T) {
	cases := []struct {
		name string
		do   func(e *Encoder)
		want string
	}{
		{"too few fields", func(e *Encoder) { e.Begin(2); e.Int4(1); e.Begin(1) }, "dbio: Encoder row 1 has 1 of its 2 fields"},
		{"too many fields", func(e *Encoder) { e.Begin(1); e.Int4(1); e.Int4(2) }, "dbio: Encoder row 1 has more than its 1 fields"},
		{"field before Begin", func(e *Encoder) { e.Float8(1) }, "dbio: Encoder field before Begin"},
		{"negative count", func(e *Encoder) { e.Begin(-1) }, "dbio: Encoder row of -1 fields"},
		{"row not of the table's width", func(e *Encoder) { e.cols = 3; e.Begin(2) }, "dbio: Encoder row of 2 fields, want 3"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			defer func() {
				if got := fmt.Sprint(recover()); got != c.want {
					t.Errorf("panic = %q, want %q", got, c.want)
				}
			}()
			c.do(&Encoder{})
		})
	}
}

func TestCopyInSQL(t *testing.T) {
	for _, c := range []struct {
		mode CopyMode
		want string
	}{
		{CopyPlain, `COPY "s"."Out""put" ("key", "g r") FROM STDIN (FORMAT binary)`},
		{CopyFrozen, `COPY "s"."Out""put" ("key", "g r") FROM STDIN (FORMAT binary, FREEZE)`},
	} {
		if got := CopyInSQL(pgx.Identifier{"s", `Out"put`}, []string{"key", "g r"}, c.mode); got != c.want {
			t.Errorf("CopyInSQL(mode %d) = %s, want %s", c.mode, got, c.want)
		}
	}
}

// TestCopyInRoundTrip reads keys of each type through a Reader, writes them
// back verbatim with CopyIn beside an int4 and a float8 derived from the
// row number, and checks in SQL that every row landed with the key of its
// source row and the right numbers.
func TestCopyInRoundTrip(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	const n = 3000 // several pipe buffers' worth only for text keys; the counts check all
	makeObs(t, conn, schema, n)
	cases := []struct {
		keyCol, keyType string
	}{
		{"id", "bigint"},
		{"name", "text"},
		{"tag", "uuid"},
	}
	for _, c := range cases {
		t.Run(c.keyType, func(t *testing.T) {
			out := "out_" + c.keyType
			mustExec(t, conn, fmt.Sprintf("CREATE TABLE %s (key %s PRIMARY KEY, cluster int4 NOT NULL, score float8 NOT NULL)",
				pgx.Identifier{schema, out}.Sanitize(), c.keyType))
			var keys Keys
			r := NewReader(ctx, conn.PgConn(), CopySQL(fmt.Sprintf("SELECT %s, g FROM %s ORDER BY g", c.keyCol, pgx.Identifier{schema, "obs"}.Sanitize()), c.keyCol, []string{"g"}), 1, ReaderConfig{ChunkRows: 1000})
			for r.Next() {
				ch := r.Chunk()
				for i := range ch.N {
					keys.Append(ch.Keys.At(i))
				}
			}
			if err := r.Err(); err != nil {
				t.Fatal(err)
			}
			if err := r.Close(); err != nil {
				t.Fatal(err)
			}
			if keys.Len() != n {
				t.Fatalf("read %d keys, want %d", keys.Len(), n)
			}
			i := 0
			rows, err := CopyIn(ctx, conn.PgConn(), pgx.Identifier{schema, out}, []string{"key", "cluster", "score"}, CopyPlain, func(e *Encoder) (bool, error) {
				for range 7 { // several rows per call
					if i == keys.Len() {
						return false, nil
					}
					e.Begin(3)
					e.Raw(keys.At(i))
					e.Int4(int32(i%5 + 1))
					e.Float8(float64(i) / 7)
					i++
				}
				return true, nil
			})
			if err != nil {
				t.Fatal(err)
			}
			if rows != n {
				t.Errorf("CopyIn stored %d rows, want %d", rows, n)
			}
			var matched int
			q := fmt.Sprintf(`SELECT count(*) FROM %s o JOIN %s b ON b.%s = o.key
				WHERE o.cluster = (b.g - 1) %% 5 + 1 AND o.score = (b.g - 1)::float8 / 7`,
				pgx.Identifier{schema, out}.Sanitize(), pgx.Identifier{schema, "obs"}.Sanitize(), c.keyCol)
			if err := conn.QueryRow(ctx, q).Scan(&matched); err != nil {
				t.Fatal(err)
			}
			if matched != n {
				t.Errorf("%d of %d rows match their source row", matched, n)
			}
		})
	}
}

// TestCopyInFrozen checks CopyFrozen against PostgreSQL's rules for COPY
// FREEZE (its documentation of COPY): into a table created in the same
// transaction the rows arrive frozen on all-visible pages, which ANALYZE
// then counts in pg_class.relallvisible (every page, where a plain COPY
// leaves none); into an older table the server refuses, and nothing is
// stored.
func TestCopyInFrozen(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	const n = 20_000
	rows := func() func(e *Encoder) (bool, error) {
		i := 0
		return func(e *Encoder) (bool, error) {
			for range 100 {
				e.Begin(2)
				e.Int8(int64(i))
				e.Int4(int32(i % 7))
				i++
			}
			return i < n, nil
		}
	}
	for _, c := range []struct {
		name    string
		mode    CopyMode
		visible bool // every page all-visible after ANALYZE
	}{
		{"plain", CopyPlain, false},
		{"frozen", CopyFrozen, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			tbl := pgx.Identifier{schema, "new_" + c.name}
			tx, err := conn.Begin(ctx)
			if err != nil {
				t.Fatal(err)
			}
			defer tx.Rollback(context.WithoutCancel(ctx))
			if _, err := tx.Exec(ctx, "CREATE TABLE "+tbl.Sanitize()+" (key bigint NOT NULL, cluster int4 NOT NULL)"); err != nil {
				t.Fatal(err)
			}
			got, err := CopyIn(ctx, conn.PgConn(), tbl, []string{"key", "cluster"}, c.mode, rows())
			if err != nil {
				t.Fatal(err)
			}
			if got != n {
				t.Fatalf("stored %d rows, want %d", got, n)
			}
			if _, err := tx.Exec(ctx, "ANALYZE "+tbl.Sanitize()); err != nil {
				t.Fatal(err)
			}
			if err := tx.Commit(ctx); err != nil {
				t.Fatal(err)
			}
			var pages, visible int64
			if err := conn.QueryRow(ctx, "SELECT relpages, relallvisible FROM pg_class WHERE oid = $1::regclass", tbl.Sanitize()).Scan(&pages, &visible); err != nil {
				t.Fatal(err)
			}
			if pages < 2 {
				t.Fatalf("relpages = %d: too few rows to tell", pages)
			}
			want := int64(0)
			if c.visible {
				want = pages
			}
			if visible != want {
				t.Errorf("relallvisible = %d of %d pages, want %d", visible, pages, want)
			}
		})
	}

	t.Run("older table", func(t *testing.T) {
		tbl := pgx.Identifier{schema, "old"}
		mustExec(t, conn, "CREATE TABLE "+tbl.Sanitize()+" (key bigint NOT NULL, cluster int4 NOT NULL)")
		_, err := CopyIn(ctx, conn.PgConn(), tbl, []string{"key", "cluster"}, CopyFrozen, rows())
		var pgErr *pgconn.PgError
		// 55000 object_not_in_prerequisite_state, PostgreSQL 15's code for
		// "cannot perform COPY FREEZE because the table was not created or
		// truncated in the current subtransaction".
		if !errors.As(err, &pgErr) || pgErr.Code != "55000" || !strings.Contains(pgErr.Message, "FREEZE") {
			t.Fatalf("err = %v, want the server's refusal of FREEZE (55000)", err)
		}
		var stored int64
		if err := conn.QueryRow(ctx, "SELECT count(*) FROM "+tbl.Sanitize()).Scan(&stored); err != nil {
			t.Fatal(err)
		}
		if stored != 0 {
			t.Errorf("%d rows stored after the refusal", stored)
		}
	})
}

// TestCopyInErrors checks that a failing COPY reports the right cause and
// stores nothing, and that the connection stays usable.
func TestCopyInErrors(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	tbl := pgx.Identifier{schema, "dst"}
	mustExec(t, conn, "CREATE TABLE "+tbl.Sanitize()+" (key bigint, cluster int4)")
	boom := errors.New("no more labels")
	cases := []struct {
		name    string
		table   pgx.Identifier
		next    func(e *Encoder) (bool, error)
		wantErr string
		code    string // SQLSTATE, if a server error
		is      error
	}{
		{
			name:  "producer error",
			table: tbl,
			next: func() func(e *Encoder) (bool, error) {
				i := 0
				return func(e *Encoder) (bool, error) {
					if i == 5000 {
						return false, boom
					}
					e.Begin(2)
					e.Int8(int64(i))
					e.Int4(1)
					i++
					return true, nil
				}
			}(),
			wantErr: fmt.Sprintf("copy into %s: no more labels", tbl.Sanitize()),
			is:      boom,
		},
		{
			name:  "no such table",
			table: pgx.Identifier{schema, "nowhere"},
			next: func(e *Encoder) (bool, error) {
				e.Begin(2)
				e.Int8(1)
				e.Int4(1)
				return true, nil // never ends: the COPY's failure must stop it
			},
			code: "42P01",
		},
		{
			name:  "wrong binary format",
			table: tbl,
			next: func(e *Encoder) (bool, error) {
				e.Begin(2)
				e.Int4(1) // an int4 where the column is bigint
				e.Int4(1)
				return false, nil
			},
			code: "08P01", // "insufficient data left in message", as PostgreSQL 15 reports it
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rows, err := CopyIn(ctx, conn.PgConn(), c.table, []string{"key", "cluster"}, CopyPlain, c.next)
			if err == nil {
				t.Fatalf("no error; %d rows", rows)
			}
			if c.wantErr != "" && err.Error() != c.wantErr {
				t.Errorf("err = %v, want %s", err, c.wantErr)
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Errorf("errors.Is(err, %v) = false", c.is)
			}
			if c.code != "" {
				var pe *pgconn.PgError
				if !errors.As(err, &pe) || pe.Code != c.code {
					t.Errorf("err = %v, want SQLSTATE %s", err, c.code)
				}
			}
			var count int
			if err := conn.QueryRow(ctx, "SELECT count(*) FROM "+tbl.Sanitize()).Scan(&count); err != nil {
				t.Fatalf("connection not usable after the failed COPY: %v", err)
			}
			if count != 0 {
				t.Errorf("%d rows stored by a failed COPY", count)
			}
		})
	}
}

// TestCopyInPanic checks that a panic in the producer reaches the caller
// and leaves the connection usable.
func TestCopyInPanic(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	tbl := pgx.Identifier{schema, "dst"}
	mustExec(t, conn, "CREATE TABLE "+tbl.Sanitize()+" (key bigint)")
	func() {
		defer func() {
			if got := fmt.Sprint(recover()); got != "producer bug" {
				t.Errorf("recovered %q, want the producer's panic", got)
			}
		}()
		_, _ = CopyIn(ctx, conn.PgConn(), tbl, []string{"key"}, CopyPlain, func(e *Encoder) (bool, error) {
			panic("producer bug")
		})
	}()
	var one int
	if err := conn.QueryRow(ctx, "SELECT 1").Scan(&one); err != nil || one != 1 {
		t.Fatalf("connection not usable after the panic: %v", err)
	}
}

// BenchmarkWrite measures CopyIn of 10^6 rows of a bigint key, an int4 and
// a float8 (the shape of a labelled result) and, in the same benchmark,
// psql loading the same binary stream from a file with COPY FROM STDIN,
// the two alternating. ratio is our rate over psql's, from the total
// times; ratio-best the same from each one's fastest run, which is less
// disturbed by other load on the machine. psql's time includes starting
// the process and connecting (a few ms).
func BenchmarkWrite(b *testing.B) {
	const n = 1_000_000
	ctx := b.Context()
	conn := dbtest.Conn(b)
	url, schema := dbtest.Schema(b)
	tbl := pgx.Identifier{schema, "w"}
	mustExec(b, conn, "CREATE TABLE "+tbl.Sanitize()+" (key bigint, cluster int4, score float8)")
	row := func(e *Encoder, i int) {
		e.Begin(3)
		e.Int8(int64(i))
		e.Int4(int32(i%10 + 1))
		e.Float8(float64(i) * 0.25)
	}
	// The same stream as a file for psql.
	var e Encoder
	e.buf = append(e.buf, copyHeader...)
	for i := range n {
		row(&e, i)
	}
	e.buf = append(e.buf, trl...)
	file := filepath.Join(b.TempDir(), "rows.bin")
	if err := os.WriteFile(file, e.buf, 0o644); err != nil {
		b.Fatal(err)
	}
	psql := psqlPath(b)
	copySQL := CopyInSQL(tbl, []string{"key", "cluster", "score"}, CopyPlain)
	var ours, theirs time.Duration
	bestOurs, bestTheirs := time.Duration(math.MaxInt64), time.Duration(math.MaxInt64)
	b.ResetTimer()
	for range b.N {
		b.StopTimer()
		mustExec(b, conn, "TRUNCATE "+tbl.Sanitize())
		b.StartTimer()
		start := time.Now()
		i := 0
		got, err := CopyIn(ctx, conn.PgConn(), tbl, []string{"key", "cluster", "score"}, CopyPlain, func(e *Encoder) (bool, error) {
			for range 64 {
				if i == n {
					return false, nil
				}
				row(e, i)
				i++
			}
			return true, nil
		})
		took := time.Since(start)
		ours += took
		bestOurs = min(bestOurs, took)
		if err != nil || got != n {
			b.Fatalf("CopyIn: %d rows, %v", got, err)
		}
		b.StopTimer()
		mustExec(b, conn, "TRUNCATE "+tbl.Sanitize())
		f, err := os.Open(file)
		if err != nil {
			b.Fatal(err)
		}
		cmd := exec.CommandContext(ctx, psql, "-X", "-q", "-v", "ON_ERROR_STOP=1", "-d", url, "-c", copySQL)
		cmd.Stdin = f
		start = time.Now()
		out, err := cmd.CombinedOutput()
		took = time.Since(start)
		theirs += took
		bestTheirs = min(bestTheirs, took)
		f.Close()
		if err != nil {
			b.Fatalf("psql: %v: %s", err, out)
		}
		b.StartTimer()
	}
	b.StopTimer()
	rate := float64(n) * float64(b.N) / ours.Seconds()
	prate := float64(n) * float64(b.N) / theirs.Seconds()
	b.ReportMetric(rate, "rows/s")
	b.ReportMetric(prate, "psql-rows/s")
	b.ReportMetric(rate/prate, "ratio")
	b.ReportMetric(bestTheirs.Seconds()/bestOurs.Seconds(), "ratio-best")
}

// psqlPath finds psql: on PATH, else beside the server binaries in
// Debian's layout.
func psqlPath(tb testing.TB) string {
	if p, err := exec.LookPath("psql"); err == nil {
		return p
	}
	matches, _ := filepath.Glob("/usr/lib/postgresql/*/bin/psql")
	if len(matches) == 0 {
		tb.Fatal("psql not found on PATH nor in /usr/lib/postgresql/*/bin; install postgresql-client")
	}
	return matches[len(matches)-1]
}

// mustExec runs one statement.
func mustExec(tb testing.TB, conn *pgx.Conn, sql string) {
	tb.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	if _, err := conn.Exec(ctx, sql); err != nil {
		tb.Fatalf("%s: %v", strings.SplitN(sql, "\n", 2)[0], err)
	}
}
