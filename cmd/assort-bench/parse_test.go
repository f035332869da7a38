package main

import (
	"math"
	"strings"
	"testing"
)

func TestParseBenchOutput(t *testing.T) {
	// Lines in the format of `go test -bench` (testing.BenchmarkResult's
	// String with extra metrics), copied from a run of the fit benchmarks.
	out := `goos: linux
goarch: amd64
pkg: assort/fit
cpu: Intel(R) Xeon(R) Processor
BenchmarkLloydIteration/k=8-2 	       4	 284642590 ns/op	         9.600 evals/row/iter	         5.000 iters	        56.93 ns/row/iter
BenchmarkLloydPass-2                   	      38	  57906535 ns/op	  17269208 rows/s
BenchmarkMixtureIteration/n=1000000/d=8/k=8/full-2         	       4	 295814548 ns/op	       293.9 cpu-ms/iter	       295.8 ms/iter	   3380496 rows/s
    hamerly_test.go:300: a log line
BenchmarkBroken-2 	 x	 12 ns/op
PASS
`
	got := parseBenchOutput(strings.NewReader(out))
	tests := []struct {
		name   string
		procs  int
		n      int64
		metric string
		want   float64
	}{
		{"BenchmarkLloydIteration/k=8", 2, 4, "ns/row/iter", 56.93},
		{"BenchmarkLloydIteration/k=8", 2, 4, "ns/op", 284642590},
		{"BenchmarkLloydPass", 2, 38, "rows/s", 17269208},
		{"BenchmarkMixtureIteration/n=1000000/d=8/k=8/full", 2, 4, "ms/iter", 295.8},
	}
	for _, tt := range tests {
		t.Run(tt.name+" "+tt.metric, func(t *testing.T) {
			r, ok := got[tt.name]
			if !ok {
				t.Fatalf("%s not parsed; got %v", tt.name, got)
			}
			if r.Procs != tt.procs || r.N != tt.n || r.Metrics[tt.metric] != tt.want {
				t.Errorf("procs %d, n %d, %s %v; want %d, %d, %v", r.Procs, r.N, tt.metric, r.Metrics[tt.metric], tt.procs, tt.n, tt.want)
			}
		})
	}
	if len(got) != 3 {
		t.Errorf("parsed %d results, want 3 (the malformed line skipped): %v", len(got), got)
	}
	// The k=8 sub-benchmark is preferred, the plain name is the fallback.
	if r, ok := lookupBench(got, benchLloydIteration); !ok || r.Name != "BenchmarkLloydIteration/k=8" {
		t.Errorf("lookupBench(LloydIteration) = %v, %v", r.Name, ok)
	}
	if r, ok := lookupBench(got, benchLloydPass); !ok || r.Name != benchLloydPass {
		t.Errorf("lookupBench(LloydPass) = %v, %v", r.Name, ok)
	}
	if _, ok := lookupBench(got, benchHamerly); ok {
		t.Errorf("lookupBench found a benchmark that did not run")
	}
}

func TestScanMaxRSS(t *testing.T) {
	tests := []struct {
		name    string
		in      string
		want    int64
		wantErr bool
	}{
		// The layout of GNU time 1.9's -v output (Debian's time package).
		{name: "gnu time", in: "\tCommand being timed: \"true\"\n\tUser time (seconds): 0.00\n\tMaximum resident set size (kbytes): 125044\n\tAverage resident set size (kbytes): 0\n", want: 125044},
		{name: "after a failed command", in: "Command exited with non-zero status 1\n\tMaximum resident set size (kbytes): 9080\n", want: 9080},
		{name: "missing", in: "\tUser time (seconds): 0.00\n", wantErr: true},
		{name: "garbled", in: "\tMaximum resident set size (kbytes): many\n", wantErr: true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := scanMaxRSS(strings.NewReader(tt.in))
			if (err != nil) != tt.wantErr || got != tt.want {
				t.Errorf("scanMaxRSS = %d, %v; want %d, error %v", got, err, tt.want, tt.wantErr)
			}
		})
	}
}

func TestParseCount(t *testing.T) {
	tests := []struct {
		in      string
		want    int64
		wantErr bool
	}{
		{in: "1e7", want: 10_000_000},
		{in: "1e6", want: 1_000_000},
		{in: "2.5e6", want: 2_500_000},
		{in: "10000000", want: 10_000_000},
		{in: "0", wantErr: true},
		{in: "1.5", wantErr: true},
		{in: "-1e6", wantErr: true},
		{in: "ten", wantErr: true},
	}
	for _, tt := range tests {
		t.Run(tt.in, func(t *testing.T) {
			got, err := parseCount(tt.in)
			if (err != nil) != tt.wantErr || got != tt.want {
				t.Errorf("parseCount(%q) = %d, %v; want %d, error %v", tt.in, got, err, tt.want, tt.wantErr)
			}
		})
	}
}

func TestMedian(t *testing.T) {
	tests := []struct {
		name string
		in   []float64
		want float64
	}{
		{"odd", []float64{3, 1, 2}, 2},
		{"even", []float64{4, 1, 3, 2}, 2.5},
		{"one", []float64{7}, 7},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			in := append([]float64(nil), tt.in...)
			if got := median(in); got != tt.want {
				t.Errorf("median(%v) = %v, want %v", tt.in, got, tt.want)
			}
			for i := range in {
				if in[i] != tt.in[i] {
					t.Fatalf("median modified its input: %v", in)
				}
			}
		})
	}
	if !math.IsNaN(medianOrNaN(nil)) {
		t.Errorf("medianOrNaN(nil) is not NaN")
	}
}

func TestAddRow(t *testing.T) {
	tests := []struct {
		name      string
		value     float64
		baseline  float64
		tg        *target
		wantRatio float64 // NaN: none
		wantMet   string  // "yes", "no", "" (none)
	}{
		{"rate met", 0.95e6, 1e6, targetRead, 0.95, "yes"},
		{"rate not met", 0.5e6, 1e6, targetRead, 0.5, "no"},
		{"time at the limit", 3, 2, targetKMeans, 1.5, "yes"},
		{"value target", 401, nan, targetLargeMB, nan, "no"},
		{"not measured", nan, 1e6, targetRead, nan, ""},
		{"no target", 2, 1, nil, 2, ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var r report
			r.addRow("m", tt.value, "s", tt.baseline, "", tt.tg, "")
			row := r.Results[0]
			switch {
			case math.IsNaN(tt.wantRatio) && row.Ratio != nil:
				t.Errorf("ratio %v, want none", *row.Ratio)
			case !math.IsNaN(tt.wantRatio) && (row.Ratio == nil || math.Abs(*row.Ratio-tt.wantRatio) > 1e-12):
				t.Errorf("ratio %v, want %v", row.Ratio, tt.wantRatio)
			}
			met := ""
			if row.Met != nil {
				met = map[bool]string{true: "yes", false: "no"}[*row.Met]
			}
			if met != tt.wantMet {
				t.Errorf("met %q, want %q", met, tt.wantMet)
			}
			if math.IsNaN(tt.value) && row.Missing == "" {
				t.Errorf("a row without a value does not say why")
			}
		})
	}
}

func TestMixtureDraws(t *testing.T) {
	// The component frequencies of 10⁵ draws match the weights
	// w_c = (c + 1)/36 within 4 binomial standard deviations, and each
	// component's sample means match μ_c within 4 standard errors σ_cf/√n_c
	// (common practice for checking a sampler); the same seed repeats the
	// same rows.
	const n = 100_000
	m := newMixture(3)
	again := newMixture(3)
	x := make([]float64, features)
	y := make([]float64, features)
	var count [components]int
	var sum [components][features]float64
	for i := range n {
		id, c := m.next(x)
		if id != int64(i+1) {
			t.Fatalf("row %d has id %d", i+1, id)
		}
		again.next(y)
		count[c]++
		for f := range x {
			if x[f] != y[f] {
				t.Fatalf("row %d differs between two mixtures of the same seed", i+1)
			}
			sum[c][f] += x[f]
		}
	}
	for c := range components {
		w := float64(c+1) / 36
		if sd := math.Sqrt(n * w * (1 - w)); math.Abs(float64(count[c])-n*w) > 4*sd {
			t.Errorf("component %d: %d rows, want about %.0f", c, count[c], n*w)
		}
		for f := range features {
			mean := sum[c][f] / float64(count[c])
			if se := m.sd[c][f] / math.Sqrt(float64(count[c])); math.Abs(mean-m.mean[c][f]) > 4*se {
				t.Errorf("component %d feature %d: mean %.3f, want %.3f", c, f, mean, m.mean[c][f])
			}
		}
	}
}

func TestCountLabel(t *testing.T) {
	tests := []struct {
		n    int64
		want string
	}{
		{10_000_000, "1e7"},
		{1_000_000, "1e6"},
		{1, "1e0"},
		{2_500_000, "2500000"},
	}
	for _, tt := range tests {
		t.Run(tt.want, func(t *testing.T) {
			if got := countLabel(tt.n); got != tt.want {
				t.Errorf("countLabel(%d) = %q, want %q", tt.n, got, tt.want)
			}
		})
	}
}
