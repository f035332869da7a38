package main

import (
	"context"
	"fmt"
	"os"

	"github.com/jackc/pgx/v5"
)

// floors measures PostgreSQL's own speed through psql on the small table,
// the baselines of assort's read and write rates:
//
//   - read: COPY (SELECT id, f1, …, f8 FROM t) TO STDOUT (FORMAT binary)
//     into /dev/null;
//   - write: COPY FROM STDIN (FORMAT binary) of as many result rows (bigint
//     key, int4 cluster, float8 probability, distance and log_density, made
//     once by the server into a file) into a new table of the result shape,
//     created in the same transaction as assort creates its own (with
//     wal_level=minimal the server then skips the WAL for both);
//   - write with key: the same followed by the primary key and ANALYZE,
//     which assort's write step also does before it commits.
//
// psql's times include starting it and connecting, a few milliseconds.
type floors struct {
	b       *bench
	readSQL string
	file    string // the result rows, binary COPY format, in the scratch directory
	out     string // the floor's result table, quoted
}

// newFloors reads the table once, untimed, so that every timed read finds
// it in the operating system's cache, and makes the file of result rows.
func (b *bench) newFloors(ctx context.Context, tbl pgx.Identifier) (*floors, error) {
	fl := &floors{
		b:       b,
		readSQL: "COPY (SELECT id, " + featureList() + " FROM " + tbl.Sanitize() + ") TO STDOUT (FORMAT binary)",
		out:     pgx.Identifier{dataSchema, floorTable}.Sanitize(),
	}
	if _, err := runProc(ctx, procSpec{What: "psql", Args: b.psqlArgs(fl.readSQL)}, "", b.tmp); err != nil {
		return nil, fmt.Errorf("warm-up read: %w", err)
	}
	f, err := os.CreateTemp(b.tmp, "results-*.copy")
	if err != nil {
		return nil, fmt.Errorf("make the result rows: %w", err)
	}
	fl.file = f.Name()
	resultSQL := "COPY (SELECT id, (1 + id % 8)::int4, 1::float8, sqrt(f1*f1 + f2*f2), -0.5*(f3*f3 + f4*f4) FROM " +
		tbl.Sanitize() + ") TO STDOUT (FORMAT binary)"
	_, err = runProc(ctx, procSpec{What: "psql", Args: b.psqlArgs(resultSQL), Stdout: f}, "", b.tmp)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return nil, fmt.Errorf("make the result rows: %w", err)
	}
	return fl, nil
}

// round times one read and the two writes, appending the seconds to the
// report's raw figures.
func (fl *floors) round(ctx context.Context) error {
	b := fl.b
	res, err := runProc(ctx, procSpec{What: "psql", Args: b.psqlArgs(fl.readSQL)}, "", b.tmp)
	if err != nil {
		return fmt.Errorf("read floor: %w", err)
	}
	b.rep.Raw.ReadFloor = append(b.rep.Raw.ReadFloor, res.Wall.Seconds())

	create := "CREATE TABLE " + fl.out + " (id bigint, cluster int4, probability float8, distance float8, log_density float8)"
	for _, withKey := range []bool{false, true} {
		cmds := []string{"BEGIN", create, "COPY " + fl.out + " FROM STDIN (FORMAT binary)"}
		if withKey {
			cmds = append(cmds, "ALTER TABLE "+fl.out+" ADD PRIMARY KEY (id)", "ANALYZE "+fl.out)
		}
		cmds = append(cmds, "COMMIT")
		res, err := runProc(ctx, procSpec{What: "psql", Args: b.psqlArgs(cmds...), Stdin: fl.file}, "", b.tmp)
		if err != nil {
			return fmt.Errorf("write floor: %w", err)
		}
		var stored int64
		if err := b.conn.QueryRow(ctx, "SELECT count(*) FROM "+fl.out).Scan(&stored); err != nil {
			return fmt.Errorf("write floor: count: %w", err)
		}
		if stored != SmallRows {
			return fmt.Errorf("write floor: psql stored %d rows, want %d", stored, SmallRows)
		}
		if _, err := b.conn.Exec(ctx, "DROP TABLE "+fl.out); err != nil {
			return fmt.Errorf("write floor: %w", err)
		}
		if withKey {
			b.rep.Raw.WriteFloorFull = append(b.rep.Raw.WriteFloorFull, res.Wall.Seconds())
		} else {
			b.rep.Raw.WriteFloor = append(b.rep.Raw.WriteFloor, res.Wall.Seconds())
		}
	}
	b.logf("floors (s): read %.2f, write %.2f, write with key %.2f", b.rep.Raw.ReadFloor[len(b.rep.Raw.ReadFloor)-1],
		b.rep.Raw.WriteFloor[len(b.rep.Raw.WriteFloor)-1], b.rep.Raw.WriteFloorFull[len(b.rep.Raw.WriteFloorFull)-1])
	return nil
}

// psqlArgs is psql's command line for the throwaway server, running cmds
// in order in one session, stopping at the first error.
func (b *bench) psqlArgs(cmds ...string) []string {
	args := []string{b.psql, "-X", "-q", "-v", "ON_ERROR_STOP=1", "-d", b.url}
	for _, c := range cmds {
		args = append(args, "-c", c)
	}
	return args
}
