package main

import (
	"bufio"
	"bytes"
	"context"
	"fmt"
	"io"
	"os/exec"
	"strconv"
	"strings"
)

// Benchmarks of package fit that the report uses. All four work on 10⁶
// rows × 8 features with k = 8, sizes the benchmarks themselves fix
// (fit/lloyd_test.go, fit/hamerly_test.go, fit/mixture_bench_test.go); the
// iteration benchmarks also run other k as sub-benchmarks, of which the
// "k=8" one is used (or the benchmark itself when it has none).
const (
	benchLloydPass      = "BenchmarkLloydPass"        // one plain assignment pass, random centres
	benchLloydIteration = "BenchmarkLloydIteration"   // plain Lloyd iterations to convergence, blobs
	benchHamerly        = "BenchmarkHamerlyIteration" // the same with Hamerly's bounds
	benchMixture        = "BenchmarkMixtureIteration/n=1000000/d=8/k=8/full"
	benchSubK           = "k=8"

	numN, numD, numK = 1_000_000, 8, 8 // rows, features and clusters of all four
)

// fitBenchPatterns select the benchmarks above. go test's -bench matches
// each /-separated part of a name separately, and a benchmark without
// sub-benchmarks that matches only the first part of a longer pattern is
// not run, hence two patterns (two runs of the binary).
var fitBenchPatterns = []string{
	"^(BenchmarkLloydPass|BenchmarkLloydIteration|BenchmarkHamerlyIteration)$",
	"^BenchmarkMixtureIteration$/^n=1000000$/^d=8$/^k=8$/^full$",
}

// lookupBench returns the result of benchmark name's "k=8" sub-benchmark,
// else of name itself.
func lookupBench(res map[string]benchResult, name string) (benchResult, bool) {
	if r, ok := res[name+"/"+benchSubK]; ok {
		return r, true
	}
	r, ok := res[name]
	return r, ok
}

// benchResult is one line of `go test -bench` output.
type benchResult struct {
	Name    string             `json:"name"` // without the -GOMAXPROCS suffix
	Procs   int                `json:"procs"`
	N       int64              `json:"n"`
	Metrics map[string]float64 `json:"metrics"` // unit to value: "ns/op", "rows/s", ...
}

// runFitBenchmarks runs the fit test binary's benchmarks in dir and
// returns the results by name, and the raw output.
func runFitBenchmarks(ctx context.Context, bin, dir, benchtime string) (map[string]benchResult, string, error) {
	var out bytes.Buffer
	for _, pat := range fitBenchPatterns {
		cmd := exec.CommandContext(ctx, bin, "-test.run", "^$", "-test.bench", pat,
			"-test.benchtime", benchtime, "-test.count", "1")
		cmd.Dir = dir
		cmd.Stdout, cmd.Stderr = &out, &out
		if err := cmd.Run(); err != nil {
			return parseBenchOutput(bytes.NewReader(out.Bytes())), out.String(),
				fmt.Errorf("%s -test.bench %q: %w\n%s", bin, pat, err, tail(out.String(), 2000))
		}
	}
	return parseBenchOutput(bytes.NewReader(out.Bytes())), out.String(), nil
}

// parseBenchOutput reads the result lines of `go test -bench` output:
//
//	BenchmarkLloydPass-2   	      96	  12345678 ns/op	  81000000 rows/s
//
// Other lines (PASS, goos:, log output) are skipped.
func parseBenchOutput(r io.Reader) map[string]benchResult {
	res := map[string]benchResult{}
	sc := bufio.NewScanner(r)
	for sc.Scan() {
		f := strings.Fields(sc.Text())
		if len(f) < 4 || !strings.HasPrefix(f[0], "Benchmark") || len(f)%2 != 0 {
			continue
		}
		n, err := strconv.ParseInt(f[1], 10, 64)
		if err != nil {
			continue
		}
		b := benchResult{Name: f[0], Procs: 1, N: n, Metrics: map[string]float64{}}
		if i := strings.LastIndexByte(f[0], '-'); i > 0 {
			if p, err := strconv.Atoi(f[0][i+1:]); err == nil {
				b.Name, b.Procs = f[0][:i], p
			}
		}
		ok := true
		for i := 2; i+1 < len(f); i += 2 {
			v, err := strconv.ParseFloat(f[i], 64)
			if err != nil {
				ok = false
				break
			}
			b.Metrics[f[i+1]] = v
		}
		if ok {
			res[b.Name] = b
		}
	}
	return res
}

// tail returns about the last max bytes of s.
func tail(s string, max int) string {
	if len(s) <= max {
		return s
	}
	return "…" + s[len(s)-max:]
}
