// Package dbio moves rows between PostgreSQL and assort: it opens
// connections, describes and reads a query's result with a binary COPY in
// chunks, and writes results back with a binary COPY.
//
// Reading. The user's query runs as given, wrapped by CopySQL so that the
// server casts every feature to float8, inside a READ ONLY transaction
// opened by the caller. A Reader decodes the COPY stream (see Decoder) into
// Chunks of at most ChunkRows rows, Scanner-style:
//
//	r := dbio.NewReader(ctx, conn.PgConn(), copySQL, len(features), cfg)
//	defer r.Close()
//	for r.Next() {
//		c := r.Chunk() // valid until the next call to Next
//	}
//	if err := r.Err(); err != nil { ... }
//
// A Reader owns its connection from NewReader to Close: nothing else may use
// the connection (or its transaction) in between. Closing before the end
// cancels the COPY, which aborts the caller's transaction; roll it back.
// A cancelled context closes the connection, as pgconn does.
//
// Keys are kept as the server sent them, in PostgreSQL's binary format for
// their type, and written back verbatim: a key of any type (bigint, text,
// uuid, a composite) round-trips without being decoded.
//
// Validation of data happens here, before any numerics: a NULL key, a
// ragged row, or a NULL, NaN or infinite feature is a *RowError naming the
// row, the column and, where it can be shown, the key.
//
// Writing. CopyIn streams rows produced by a callback into a table with a
// binary COPY FROM; an Encoder builds the rows.
//
// Every call that does I/O takes a context first.
package dbio
