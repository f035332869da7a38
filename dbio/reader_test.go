package dbio

import (
	"bytes"
	"context"
	"crypto/md5"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"os/exec"
	"strconv"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio/dbtest"
)

// TestMain runs the tests against a real PostgreSQL (see dbtest).
func TestMain(m *testing.M) { dbtest.Main(m) }

// makeObs creates schema.obs with n rows, g = 1..n, whose every column is
// a function of g that Go computes with the same IEEE operations (see
// obsRow): keys of three types and features of four numeric types.
func makeObs(tb testing.TB, conn *pgx.Conn, schema string, n int) {
	tb.Helper()
	t := pgx.Identifier{schema, "obs"}.Sanitize()
	mustExec(tb, conn, "CREATE TABLE "+t+` (
		g int PRIMARY KEY, id bigint NOT NULL, name text NOT NULL, tag uuid NOT NULL,
		n numeric, i int, r real, d double precision, s text)`)
	mustExec(tb, conn, fmt.Sprintf(`INSERT INTO %s
		SELECT g, g::bigint * 1000003 - 5000000, 'row-' || g, md5(g::text)::uuid,
			g / 8.0, g * 3 - 1000, g::real / 3::real, g * 0.1::float8, 'text ' || g
		FROM generate_series(1, %d) g`, t, n))
}

// obsRow gives the keys and the features n, i, r, d of row g of obs.
func obsRow(g int) (id int64, name string, tag [16]byte, x [4]float64) {
	id = int64(g)*1000003 - 5000000
	name = "row-" + strconv.Itoa(g)
	tag = md5.Sum([]byte(strconv.Itoa(g))) // md5(g::text)::uuid is the digest's 16 bytes
	x = [4]float64{
		float64(g) / 8,                   // numeric g/8.0 is exact in binary
		float64(g*3 - 1000),              // int
		float64(float32(g) / float32(3)), // real division, widened exactly
		float64(g) * 0.1,                 // float8 product
	}
	return
}

// readOnly begins the READ ONLY transaction a Reader runs in, rolled back
// at the end of the test.
func readOnly(tb testing.TB, conn *pgx.Conn) pgx.Tx {
	tb.Helper()
	tx, err := conn.BeginTx(tb.Context(), pgx.TxOptions{AccessMode: pgx.ReadOnly})
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() {
		_ = tx.Rollback(context.Background()) // may be done already; the test checks what matters
	})
	return tx
}

// TestReader reads obs in chunks of several sizes with keys of three types
// and checks every key and every value.
func TestReader(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	const n = 1000
	makeObs(t, conn, schema, n)
	features := []string{"n", "i", "r", "d"}
	cases := []struct {
		name      string
		key       string
		keyType   uint32
		chunkRows int
	}{
		{"bigint key, chunks of 1", "id", oidInt8, 1},
		{"bigint key, chunks of 7", "id", oidInt8, 7},
		{"bigint key, chunks of 65536", "id", oidInt8, 65536},
		{"bigint key, default chunks", "id", oidInt8, 0},
		{"text key, chunks of 7", "name", oidText, 7},
		{"uuid key, chunks of 7", "tag", oidUUID, 7},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			readOnly(t, conn)
			query := fmt.Sprintf("SELECT %s, n, i, r, d, s FROM %s ORDER BY g;", c.key, pgx.Identifier{schema, "obs"}.Sanitize())
			r := NewReader(ctx, conn.PgConn(), CopySQL(query, c.key, features), len(features),
				ReaderConfig{ChunkRows: c.chunkRows, KeyType: c.keyType, KeyName: c.key, Features: features})
			defer r.Close()
			size := c.chunkRows
			if size == 0 {
				size = DefaultChunkRows
			}
			g := 0
			chunks := 0
			for r.Next() {
				ch := r.Chunk()
				chunks++
				if want := min(size, n-g); ch.N != want || ch.D != 4 || len(ch.X) != ch.N*4 || ch.Keys.Len() != ch.N {
					t.Fatalf("chunk %d: N, D, len(X), keys = %d, %d, %d, %d; want %d rows of 4", chunks, ch.N, ch.D, len(ch.X), ch.Keys.Len(), want)
				}
				if ch.First != int64(g) {
					t.Fatalf("chunk %d: First = %d, want %d", chunks, ch.First, g)
				}
				for i := range ch.N {
					g++
					id, name, tag, x := obsRow(g)
					var want []byte
					switch c.key {
					case "id":
						want = binary.BigEndian.AppendUint64(nil, uint64(id))
					case "name":
						want = []byte(name)
					case "tag":
						want = tag[:]
					}
					if got := ch.Keys.At(i); string(got) != string(want) {
						t.Fatalf("row %d: key %x, want %x", g, got, want)
					}
					for j := range 4 {
						if got := ch.X[i*4+j]; got != x[j] {
							t.Fatalf("row %d: %s = %v, want %v", g, features[j], got, x[j])
						}
					}
				}
			}
			if err := r.Err(); err != nil {
				t.Fatal(err)
			}
			if g != n || r.RowsRead() != n || r.RowsSkipped() != 0 {
				t.Errorf("rows delivered, read, skipped = %d, %d, %d; want %d, %d, 0", g, r.RowsRead(), r.RowsSkipped(), n, n)
			}
			if want := (n + size - 1) / size; chunks != want {
				t.Errorf("%d chunks, want %d", chunks, want)
			}
			if err := r.Close(); err != nil {
				t.Errorf("Close: %v", err)
			}
		})
	}
}

// TestReaderMissing checks NULL, NaN and infinite features under both
// policies, and NULL keys.
func TestReaderMissing(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	bad := pgx.Identifier{schema, "bad"}.Sanitize()
	mustExec(t, conn, "CREATE TABLE "+bad+" (id bigint, name text, x float8, y numeric)")
	mustExec(t, conn, "INSERT INTO "+bad+` VALUES
		(1, 'a', 1.5, 1), (2, 'b', NULL, 2), (3, 'c', 'NaN', 3), (4, 'd', 'Infinity', 4),
		(5, 'e', '-Infinity', 5), (6, 'f', 2.5, 'NaN'), (7, 'g', 3.5, 7)`)
	features := []string{"x", "y"}
	cases := []struct {
		name      string
		query     string
		key       string
		keyType   uint32
		missing   Missing
		chunkRows int
		wantErr   string
		is        error
		wantKeys  []int64
		wantX     []float64
		skipped   int64
	}{
		{name: "null", query: "SELECT id, x, y FROM %s WHERE id IN (1, 2) ORDER BY id", key: "id", keyType: oidInt8,
			wantErr: `read chunk 1: row 2 (key 2): column "x": NULL`, is: ErrNull},
		{name: "nan", query: "SELECT id, x, y FROM %s WHERE id IN (1, 3) ORDER BY id", key: "id", keyType: oidInt8,
			wantErr: `read chunk 1: row 2 (key 3): column "x": NaN`, is: ErrNaN},
		{name: "infinity", query: "SELECT id, x, y FROM %s WHERE id IN (1, 4) ORDER BY id", key: "id", keyType: oidInt8,
			wantErr: `read chunk 1: row 2 (key 4): column "x": infinite`, is: ErrInf},
		{name: "minus infinity", query: "SELECT id, x, y FROM %s WHERE id IN (1, 5) ORDER BY id", key: "id", keyType: oidInt8,
			wantErr: `read chunk 1: row 2 (key 5): column "x": infinite`, is: ErrInf},
		{name: "numeric nan in second feature", query: "SELECT id, x, y FROM %s WHERE id IN (1, 6) ORDER BY id", key: "id", keyType: oidInt8,
			wantErr: `read chunk 1: row 2 (key 6): column "y": NaN`, is: ErrNaN},
		{name: "text key, later chunk", query: "SELECT name, x, y FROM %s WHERE id IN (1, 2) ORDER BY id", key: "name", keyType: oidText, chunkRows: 1,
			wantErr: `read chunk 2: row 2 (key "b"): column "x": NULL`, is: ErrNull},
		{name: "null key", query: "SELECT NULL::bigint AS id, x, y FROM %s WHERE id = 1", key: "id", keyType: oidInt8,
			wantErr: `read chunk 1: row 1: column "id": NULL key`, is: ErrNullKey},
		{name: "null key when skipping", query: "SELECT NULL::bigint AS id, x, y FROM %s WHERE id = 1", key: "id", keyType: oidInt8, missing: MissingSkip,
			wantErr: `read chunk 1: row 1: column "id": NULL key`, is: ErrNullKey},
		{name: "skip", query: "SELECT id, x, y FROM %s ORDER BY id", key: "id", keyType: oidInt8, missing: MissingSkip,
			wantKeys: []int64{1, 7}, wantX: []float64{1.5, 1, 3.5, 7}, skipped: 5},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			readOnly(t, conn)
			r := NewReader(ctx, conn.PgConn(), CopySQL(fmt.Sprintf(c.query, bad), c.key, features), 2,
				ReaderConfig{ChunkRows: c.chunkRows, Missing: c.missing, KeyType: c.keyType, KeyName: c.key, Features: features})
			defer r.Close()
			var keys []int64
			var x []float64
			for r.Next() {
				ch := r.Chunk()
				for i := 0; i < ch.N && c.keyType == oidInt8; i++ {
					keys = append(keys, int64(binary.BigEndian.Uint64(ch.Keys.At(i))))
				}
				x = append(x, ch.X...)
			}
			err := r.Err()
			if c.wantErr != "" {
				if err == nil || err.Error() != c.wantErr {
					t.Fatalf("err = %v\nwant  %s", err, c.wantErr)
				}
				var re *RowError
				if !errors.As(err, &re) || !errors.Is(err, c.is) {
					t.Errorf("err is not a *RowError for %v", c.is)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if fmt.Sprint(keys) != fmt.Sprint(c.wantKeys) || fmt.Sprint(x) != fmt.Sprint(c.wantX) {
				t.Errorf("keys %v, x %v; want %v, %v", keys, x, c.wantKeys, c.wantX)
			}
			if r.RowsSkipped() != c.skipped || r.RowsRead() != 7 {
				t.Errorf("skipped, read = %d, %d; want %d, 7", r.RowsSkipped(), r.RowsRead(), c.skipped)
			}
		})
	}
}

// TestReaderFailures checks errors that stop a read: the server's, during
// and before the COPY, and a row of the wrong width; and that the
// connection is usable after Close and a rollback.
func TestReaderFailures(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	_, schema := dbtest.Schema(t)
	sink := pgx.Identifier{schema, "sink"}.Sanitize()
	mustExec(t, conn, "CREATE TABLE "+sink+" (id bigint, x float8)")
	cases := []struct {
		name       string
		copySQL    string
		d          int
		chunkRows  int
		wantChunks int
		wantErr    string
		code       string
		writable   bool // run outside a READ ONLY transaction
	}{
		{
			name:       "division by zero at row 600",
			copySQL:    CopySQL("SELECT g AS id, 1.0 / (g - 600) AS x FROM generate_series(1, 1000) g", "id", []string{"x"}),
			d:          1,
			chunkRows:  100,
			wantChunks: 5,
			wantErr:    "read chunk 6: copy out: ERROR: division by zero (SQLSTATE 22012)",
			code:       "22012",
		},
		{
			name:    "no cast to float8",
			copySQL: CopySQL("SELECT 1 AS id, 1::money AS m", "id", []string{"m"}),
			d:       1,
			wantErr: "read chunk 1: copy out: ERROR: cannot cast type money to double precision (SQLSTATE 42846) at line 1, column 27:\n" +
				"    COPY (SELECT q.\"id\", q.\"m\"::float8 FROM (\n" +
				"                              ^", // the server points at the cast
			code: "42846",
		},
		{
			name:    "not a COPY",
			copySQL: "SELECT 1 AS id, 2.0 AS x",
			d:       1,
			wantErr: "read chunk 1: copy out: the statement is not a COPY TO STDOUT",
		},
		{
			name:    "a COPY in text format",
			copySQL: "COPY (SELECT 1 AS id, 2.0 AS x) TO STDOUT",
			d:       1,
			wantErr: "read chunk 1: copy out: the COPY sends text, not binary",
		},
		{
			name:     "a COPY FROM",
			copySQL:  "COPY " + sink + " FROM STDIN (FORMAT binary)",
			d:        1,
			writable: true,
			wantErr:  "read chunk 1: copy out: the statement is not a COPY TO STDOUT",
		},
		{
			name:    "row wider than said",
			copySQL: CopySQL("SELECT 1 AS id, 2 AS a, 3 AS b", "id", []string{"a", "b"}),
			d:       1,
			wantErr: "read chunk 1: row 1: wrong number of fields: 3, want 2",
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var tx pgx.Tx
			if !c.writable {
				tx = readOnly(t, conn)
			}
			r := NewReader(ctx, conn.PgConn(), c.copySQL, c.d, ReaderConfig{ChunkRows: c.chunkRows})
			chunks := 0
			for r.Next() {
				chunks++
			}
			err := r.Err()
			if err == nil || err.Error() != c.wantErr {
				t.Fatalf("err = %v\nwant  %s", err, c.wantErr)
			}
			if chunks != c.wantChunks {
				t.Errorf("%d chunks before the error, want %d", chunks, c.wantChunks)
			}
			if c.code != "" {
				var pe *pgconn.PgError
				if !errors.As(err, &pe) || pe.Code != c.code {
					t.Errorf("no *pgconn.PgError with SQLSTATE %s in %v", c.code, err)
				}
			}
			if err := r.Close(); err != nil {
				t.Fatalf("Close: %v", err)
			}
			if tx != nil {
				if err := tx.Rollback(ctx); err != nil {
					t.Fatalf("rollback: %v", err)
				}
			}
			var rows int
			if err := conn.QueryRow(ctx, "SELECT count(*) FROM "+sink).Scan(&rows); err != nil || rows != 0 {
				t.Fatalf("connection not usable, or rows copied in: %d, %v", rows, err)
			}
		})
	}
}

// hugeCopy sends 10^7 rows, starting at once: a function scan in FROM
// gathers all its rows before the first one leaves, so two small series
// are crossed instead.
var hugeCopy = CopySQL(`SELECT (a - 1) * 100000 + b AS id, b::float8 AS x
	FROM generate_series(1, 100) a, generate_series(1, 100000) b`, "id", []string{"x"})

// TestReaderEarlyClose checks that closing a Reader in the middle of a
// large COPY, or before reading anything, ends the COPY and leaves the
// connection usable.
func TestReaderEarlyClose(t *testing.T) {
	ctx := t.Context()
	conn := dbtest.Conn(t)
	cases := []struct {
		name   string
		chunks int // chunks read before Close
		inTx   bool
	}{
		{"after one chunk, in a transaction", 1, true},
		{"before reading, in a transaction", 0, true},
		{"after three chunks, no transaction", 3, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var tx pgx.Tx
			if c.inTx {
				tx = readOnly(t, conn)
			}
			r := NewReader(ctx, conn.PgConn(), hugeCopy, 1, ReaderConfig{ChunkRows: 1000})
			for range c.chunks {
				if !r.Next() {
					t.Fatalf("no chunk: %v", r.Err())
				}
			}
			if c.chunks > 0 && r.Chunk().N != 1000 {
				t.Errorf("chunk %d has %d rows, want 1000", c.chunks, r.Chunk().N)
			}
			if err := r.Close(); err != nil {
				t.Fatalf("Close: %v", err)
			}
			if err := r.Close(); err != nil {
				t.Fatalf("second Close: %v", err)
			}
			if r.Next() {
				t.Errorf("Next after Close")
			}
			if tx != nil {
				if err := tx.Rollback(ctx); err != nil {
					t.Fatalf("rollback: %v", err)
				}
			}
			var one int
			if err := conn.QueryRow(ctx, "SELECT 1").Scan(&one); err != nil || one != 1 {
				t.Fatalf("connection not usable: %v", err)
			}
		})
	}
}

// TestReaderContextCancel checks that cancelling the context stops the
// read with the context's error.
func TestReaderContextCancel(t *testing.T) {
	conn := dbtest.Conn(t) // this connection is lost by the cancellation
	ctx, cancel := context.WithCancel(t.Context())
	defer cancel()
	r := NewReader(ctx, conn.PgConn(), hugeCopy, 1, ReaderConfig{ChunkRows: 1000})
	if !r.Next() {
		t.Fatalf("no chunk: %v", r.Err())
	}
	cancel()
	for r.Next() {
	}
	if err := r.Err(); !errors.Is(err, context.Canceled) {
		t.Errorf("err = %v, want context.Canceled", err)
	}
	if err := r.Close(); err == nil {
		t.Errorf("Close on a lost connection gave no error")
	}
}

// BenchmarkRead measures a Reader over 10^6 rows of a bigint key and 8
// float8 features and, in the same benchmark and on the same server, psql
// running the same COPY into /dev/null, the two alternating. ratio is our
// rate over psql's, from the total times; ratio-best the same from each
// one's fastest run, which is less disturbed by other load on the
// machine. psql's time includes starting the process and connecting (a
// few ms).
func BenchmarkRead(b *testing.B) {
	const n = 1_000_000
	ctx := b.Context()
	conn := dbtest.Conn(b)
	url, schema := dbtest.Schema(b)
	t := pgx.Identifier{schema, "bench"}.Sanitize()
	mustExec(b, conn, "CREATE TABLE "+t+` AS SELECT g::bigint AS id,
		random() AS f1, random() AS f2, random() AS f3, random() AS f4,
		random() AS f5, random() AS f6, random() AS f7, random() AS f8
		FROM generate_series(1, `+strconv.Itoa(n)+`) g`)
	mustExec(b, conn, "VACUUM ANALYZE "+t)
	features := []string{"f1", "f2", "f3", "f4", "f5", "f6", "f7", "f8"}
	copySQL := CopySQL("SELECT * FROM "+t, "id", features)
	psql := psqlPath(b)
	var ours, theirs time.Duration
	bestOurs, bestTheirs := time.Duration(math.MaxInt64), time.Duration(math.MaxInt64)
	var sum float64
	b.ResetTimer()
	for range b.N {
		start := time.Now()
		tx, err := conn.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly})
		if err != nil {
			b.Fatal(err)
		}
		r := NewReader(ctx, conn.PgConn(), copySQL, len(features), ReaderConfig{})
		rows := 0
		for r.Next() {
			ch := r.Chunk()
			rows += ch.N
			sum += ch.X[0]
		}
		if err := r.Err(); err != nil || rows != n {
			b.Fatalf("%d rows, %v", rows, err)
		}
		if err := r.Close(); err != nil {
			b.Fatal(err)
		}
		if err := tx.Commit(ctx); err != nil {
			b.Fatal(err)
		}
		took := time.Since(start)
		ours += took
		bestOurs = min(bestOurs, took)
		b.StopTimer()
		cmd := exec.CommandContext(ctx, psql, "-X", "-q", "-v", "ON_ERROR_STOP=1", "-d", url, "-c", copySQL)
		var stderr bytes.Buffer
		cmd.Stderr = &stderr // and Stdout nil: /dev/null
		start = time.Now()
		if err := cmd.Run(); err != nil {
			b.Fatalf("psql: %v: %s", err, stderr.Bytes())
		}
		took = time.Since(start)
		theirs += took
		bestTheirs = min(bestTheirs, took)
		b.StartTimer()
	}
	b.StopTimer()
	if math.IsNaN(sum) {
		b.Fatal("NaN")
	}
	rate := float64(n) * float64(b.N) / ours.Seconds()
	prate := float64(n) * float64(b.N) / theirs.Seconds()
	b.ReportMetric(rate, "rows/s")
	b.ReportMetric(prate, "psql-rows/s")
	b.ReportMetric(rate/prate, "ratio")
	b.ReportMetric(bestTheirs.Seconds()/bestOurs.Seconds(), "ratio-best")
}

// memReader is a Reader over an in-memory stream, as if a COPY of n rows
// had sent it, for measuring the decoding apart from the server.
func memReader(stream []byte, n, d int, cfg ReaderConfig) *Reader {
	if cfg.ChunkRows == 0 {
		cfg.ChunkRows = DefaultChunkRows
	}
	r := &Reader{d: d, cfg: cfg, out: &copyOut{ended: true, tag: pgconn.NewCommandTag("COPY " + strconv.Itoa(n))}}
	r.dec = NewDecoder(bytes.NewReader(stream), DecoderConfig{})
	r.chunk.D = d
	return r
}

// BenchmarkReaderDecode measures the Reader's decoding and validation of
// rows of an int8 key and 8 float8 features from memory: the work Next
// adds to the COPY's own.
func BenchmarkReaderDecode(b *testing.B) {
	const rows = 100000
	in := decoderStream(rows, 8)
	b.SetBytes(int64(len(in)))
	b.ResetTimer()
	for range b.N {
		r := memReader(in, rows, 8, ReaderConfig{})
		n := 0
		for r.Next() {
			n += r.Chunk().N
		}
		if err := r.Err(); err != nil || n != rows {
			b.Fatalf("%d rows, %v", n, err)
		}
	}
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}
