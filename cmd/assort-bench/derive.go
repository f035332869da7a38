package main

import (
	"fmt"
	"math"
	"slices"
)

// Targets from the issue.
var (
	targetRead    = &target{Of: "ratio", Op: "≥", Limit: 0.9}
	targetWrite   = &target{Of: "ratio", Op: "≥", Limit: 0.8}
	targetKMeans  = &target{Of: "ratio", Op: "≤", Limit: 1.5}
	targetLloyd   = &target{Of: "ratio", Op: "≤", Limit: 4}
	targetLargeMB = &target{Of: "value", Op: "<", Limit: 400}
)

var nan = math.NaN()

// derive fills the results table from the raw figures. Each rate is rows
// over seconds; each ratio is assort's figure over its baseline, so a rate
// ratio above 1 and a time ratio below 1 are better than the baseline.
func (b *bench) derive() {
	r := b.rep
	raw := &r.Raw
	n := float64(SmallRows)
	readFloor, writeFloor, writeFull := medianOrNaN(raw.ReadFloor), medianOrNaN(raw.WriteFloor), medianOrNaN(raw.WriteFloorFull)
	km, km1, gm := statsOf(raw.Runs[runKMeans]), statsOf(raw.Runs[runKMeansOne]), statsOf(raw.Runs[runMixture])
	med := fmt.Sprintf("median of %d", len(raw.ReadFloor))

	// Read and write rates from the k-means runs' own seconds.
	r.addRow("read rate, assort fit k-means (1e6 rows)", km.read, "rows/s", n/readFloor, "psql COPY TO /dev/null, "+med, targetRead, km.missRead)
	r.addRow("write rate, labels' COPY, k-means (1e6 rows)", km.copy, "rows/s", n/writeFloor, "psql COPY FROM, "+med, targetWrite, km.missCopy)
	r.addRow("  whole write vs COPY FROM + primary key + ANALYZE", km.write, "rows/s", n/writeFull, "psql, "+med, nil, km.missWrite)
	r.addRow("end-to-end k-means k=8 (1e6x8)", km.wall, "s", readFloor+writeFloor, "read + write floors", targetKMeans, "")
	r.addRow("  same with --restarts 1", km1.wall, "s", readFloor+writeFloor, "read + write floors", nil, "")
	r.addRow("end-to-end gmm full k=8 (1e6x8)", gm.wall, "s", readFloor+writeFloor, "read + write floors", nil, "")
	r.addRow("  gmm read rate", gm.read, "rows/s", n/readFloor, "psql COPY TO /dev/null, "+med, nil, gm.missRead)
	r.addRow("peak RSS, fit k-means (1e6x8)", km.rss, "MiB", nan, "", nil, "")
	r.addRow("peak RSS, fit gmm full (1e6x8)", gm.rss, "MiB", nan, "", nil, "")

	// Numerics against the arithmetic floor.
	madd := nan
	if len(raw.MaddRates) > 0 {
		madd = slices.Max(raw.MaddRates)
	}
	lloydFloor := numN * numK * numD / madd
	r.addRow("multiply-add rate, tight Go loop, all cores", madd, "madd/s", nan, "", nil, "")
	perIter := func(name string) (float64, string) {
		res, ok := lookupBench(raw.FitBench, name)
		if !ok {
			return nan, "not in the benchmark output"
		}
		if v, ok := res.Metrics["ns/row/iter"]; ok {
			return v * numN / 1e9, ""
		}
		if v, ok := res.Metrics["ms/iter"]; ok {
			return v / 1e3, ""
		}
		if v, ok := res.Metrics["ns/op"]; ok {
			return v / 1e9, ""
		}
		return nan, "no time per iteration in the benchmark output"
	}
	v, miss := perIter(benchLloydIteration)
	r.addRow("Lloyd iteration (1e6x8, k=8)", v, "s", lloydFloor, "n·k·d madds", targetLloyd, miss)
	v, miss = perIter(benchLloydPass)
	r.addRow("  Lloyd assignment pass alone", v, "s", lloydFloor, "n·k·d madds", nil, miss)
	v, miss = perIter(benchHamerly)
	r.addRow("  Hamerly iteration (exact, same result)", v, "s", lloydFloor, "n·k·d madds", nil, miss)
	// E-step: a triangular solve, d(d+1)/2, and a squared norm, d, per row
	// and component; M-step: the mean, d, and the scatter's triangle,
	// d(d+1)/2. The exponentials are not counted.
	emFloor := numN * numK * (numD*(numD+1) + 2*numD) / madd
	v, miss = perIter(benchMixture)
	r.addRow("EM iteration, full (1e6x8, k=8)", v, "s", emFloor, "n·k·(d(d+1)+2d) madds", nil, miss)

	// The large table.
	if r.Settings.LargeRows > 0 {
		label := fmt.Sprintf("%sx%d", countLabel(r.Settings.LargeRows), features)
		for _, c := range []struct{ run, what string }{
			{runLargeFit, "fit k-means"},
			{runLargeScore, "score"},
		} {
			runs := raw.Runs[c.run]
			mem := "--memory " + b.cfg.Memory
			if len(runs) > 0 && !slices.Contains(runs[0].Args, "--memory") {
				mem = "no --memory (flag missing)"
			}
			st := statsOf(runs)
			r.addRow("peak RSS, "+c.what+" "+label+", "+mem, st.rss, "MiB", nan, "", targetLargeMB, "")
			r.addRow("  wall time", st.wall, "s", nan, "", nil, "")
			if c.run == runLargeFit {
				r.addRow("  read rate", st.read, "rows/s", nan, "", nil, st.missRead)
				r.addRow("  write rate", st.write, "rows/s", nan, "", nil, st.missWrite)
			}
		}
	}

	r.Notes = append(r.Notes,
		"rates are rows ÷ seconds; ratio = value ÷ baseline (rates: higher is better; times: lower is better)",
		"read and write rates are rows ÷ assort's own --json seconds \"read\", \"write_copy\" (the results COPY alone, scoring included) and \"write\" (COPY, primary key, ANALYZE, registry rows, commit), medians over the rounds' k-means fits",
		"read floor: psql -c \"COPY (SELECT id, f1..f8 FROM t) TO STDOUT (FORMAT binary)\" into /dev/null; write floor: psql COPY FROM STDIN (FORMAT binary) of the same number of result rows (bigint, int4, 3 float8) into a table created in the same transaction; psql's times include starting it and connecting; psql handles the read stream row by row on its side (PQgetCopyData, fwrite), so a client decoding in bulk can beat it: a read ratio above 1 means assort is not what limits the read",
		"end-to-end: wall time of the assort process (connect, read, fit with its default restarts, write, publish), median over the rounds, ÷ (read floor + write floor); each round times the floors and then one k-means fit, so that changing load falls on both",
		"arithmetic floor: n·k·d multiply-adds (t = a − b; s += t·t) at the rate of a scalar Go loop on all cores, the faster of two measurements taken before and after the fit benchmarks; the iteration times are those of the fit package's benchmarks (go test -bench), run in the same run",
	)
}

// runStats summarises the successful runs of one kind: medians of the wall
// time and of the read and write rates (rows ÷ the --json seconds "read"
// and "write"), and the largest peak RSS. Figures of no run are NaN; a
// missing rate says why.
type runStats struct {
	wall, read, write, copy, rss  float64
	missRead, missWrite, missCopy string
}

func statsOf(runs []*assortRun) runStats {
	var wall, read, write, cp []float64
	st := runStats{wall: nan, read: nan, write: nan, copy: nan, rss: nan}
	for _, run := range runs {
		if run.Note != "" {
			continue
		}
		wall = append(wall, run.Wall)
		if run.MaxRSSMiB > 0 && (math.IsNaN(st.rss) || run.MaxRSSMiB > st.rss) {
			st.rss = run.MaxRSSMiB
		}
		if s := run.Seconds["read"]; s > 0 {
			read = append(read, float64(run.RowsRead)/s)
		} else {
			st.missRead = fmt.Sprintf("no \"read\" in --json seconds %v", run.Seconds)
		}
		if s := run.Seconds["write"]; s > 0 {
			write = append(write, float64(run.RowsUsed)/s)
		} else {
			st.missWrite = fmt.Sprintf("no \"write\" in --json seconds %v", run.Seconds)
		}
		if s := run.Seconds["write_copy"]; s > 0 {
			cp = append(cp, float64(run.RowsUsed)/s)
		} else {
			st.missCopy = fmt.Sprintf("no \"write_copy\" in --json seconds %v", run.Seconds)
		}
	}
	st.wall, st.read, st.write, st.copy = medianOrNaN(wall), medianOrNaN(read), medianOrNaN(write), medianOrNaN(cp)
	return st
}

// countLabel writes a row count as 1e7 when it is a power of ten.
func countLabel(n int64) string {
	for p, e := int64(1), 0; p <= n; p, e = p*10, e+1 {
		if p == n {
			return fmt.Sprintf("1e%d", e)
		}
	}
	return fmt.Sprint(n)
}

// medianOrNaN is the median of xs, or NaN when there are none.
func medianOrNaN(xs []float64) float64 {
	if len(xs) == 0 {
		return nan
	}
	return median(xs)
}
