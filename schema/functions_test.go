package schema

import (
	"flag"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/functions")

// smallKMeans is a scaled k-means model of 2 features and 2 components,
// numbered 2 and 1 (as after renumbering), with invented constants chosen
// to exercise the literals: a negative zero, a subnormal, an exponent.
func smallKMeans() FunctionModel {
	return FunctionModel{
		Method:   "kmeans",
		Features: []string{"g_r", `odd "name"`},
		Numbers:  []int{2, 1},
		Scale:    true,
		Center:   []float64{0.1, -3.25e-7},
		Spread:   []float64{1.0 / 3, 2},
		Centers:  []float64{-0.0, 1.5, 0.75, 5e-324},
	}
}

// smallMixture is a full-covariance mixture of 2 features and 2
// components; the factors are those of Σ_1 = [[4, 1], [1, 2]] and
// Σ_2 = [[1, 0], [0, 9]], weights 0.6 and 0.4 (values computed here with
// math, not by package fit).
func smallMixture(diagonal bool) FunctionModel {
	l1 := []float64{2, 0.5, math.Sqrt(2 - 0.25)}
	l2 := []float64{1, 0, 3}
	ln2Pi := math.Log(2 * math.Pi)
	logNorm := func(w float64, l []float64) float64 {
		return math.Log(w) - 0.5*(2*ln2Pi+2*(math.Log(l[0])+math.Log(l[2])))
	}
	fm := FunctionModel{
		Method:   "gmm",
		Features: []string{"x", "y"},
		Numbers:  []int{1, 2},
		Centers:  []float64{0.5, -1, 3, 2.25},
		Diagonal: diagonal,
		Chol:     append(append([]float64(nil), l1...), l2...),
		InvDiag:  []float64{1 / l1[0], 1 / l1[2], 1 / l2[0], 1 / l2[2]},
		LogNorm:  []float64{logNorm(0.6, l1), logNorm(0.4, l2)},
	}
	if diagonal {
		fm.Chol[1] = 0
	}
	return fm
}

// randomMixture is a mixture of d features and k components with random
// (valid) constants, for size and form checks.
func randomMixture(d, k int, diagonal bool, seed uint64) FunctionModel {
	rng := rand.New(rand.NewPCG(seed, 1))
	q := d * (d + 1) / 2
	fm := FunctionModel{Method: "gmm", Diagonal: diagonal, Scale: true}
	for a := range d {
		fm.Features = append(fm.Features, "feature_"+strconv.Itoa(a))
		fm.Center = append(fm.Center, rng.NormFloat64())
		fm.Spread = append(fm.Spread, 0.5+rng.Float64())
	}
	for j := range k {
		fm.Numbers = append(fm.Numbers, j+1)
		fm.LogNorm = append(fm.LogNorm, -float64(d)-rng.Float64())
		for range d {
			fm.Centers = append(fm.Centers, rng.NormFloat64()*3)
			fm.InvDiag = append(fm.InvDiag, 0.5+rng.Float64())
		}
		for range q {
			fm.Chol = append(fm.Chol, rng.NormFloat64())
		}
	}
	return fm
}

func withForm(fm FunctionModel, form string) FunctionModel {
	fm.Form = form
	return fm
}

func allDDL(v Version, fm FunctionModel) string {
	var s []string
	s = append(s, FunctionsDDL(v, fm)...)
	s = append(s, StableFunctionsDDL(v, fm)...)
	s = append(s, DropFunctionsDDL(v, len(fm.Features), fm.Method)...)
	s = append(s, DropStableFunctionsDDL(v.Schema, v.Model, len(fm.Features), fm.Method)...)
	return strings.Join(s, ";\n\n") + ";\n"
}

// TestFunctionsGolden compares the generated DDL with the files under
// testdata/functions; go test ./schema -run Golden -update rewrites them.
// Read the files when the generator changes: they are the review copy of
// what reaches the server.
func TestFunctionsGolden(t *testing.T) {
	cases := []struct {
		name string
		v    Version
		fm   FunctionModel
	}{
		{"kmeans_d2_k2", Version{"assort", "colours", 3}, smallKMeans()},
		{"kmeans_d2_k2_split", Version{"assort", "colours", 3}, withForm(smallKMeans(), formSplit)},
		{"gmm_full_d2_k2", Version{"assort", "pops", 1}, smallMixture(false)},
		{"gmm_full_d2_k2_chain", Version{"assort", "pops", 1}, withForm(smallMixture(false), formChain)},
		{"gmm_diag_d2_k2_split", Version{"my schema", "pops", 12}, withForm(smallMixture(true), formSplit)},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := allDDL(c.v, c.fm)
			path := filepath.Join("testdata", "functions", c.name+".sql")
			if *update {
				if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
					t.Fatal(err)
				}
				if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
					t.Fatal(err)
				}
			}
			want, err := os.ReadFile(path)
			if err != nil {
				t.Fatalf("%v (run with -update to create it)", err)
			}
			if got != string(want) {
				t.Errorf("DDL differs from %s (run with -update and review the diff):\n%s", path, got)
			}
		})
	}
}

// TestFloat8Lit: every literal parses back to the same bits (read here
// with strconv, which like PostgreSQL's float8in rounds correctly; the
// server side is checked by TestScoringFunctionLiterals in cmd/assort),
// and negative values are a parenthesised negation.
func TestFloat8Lit(t *testing.T) {
	cases := []struct {
		name string
		v    float64
		text string
	}{
		{"tenth", 0.1, "0.1::float8"},
		{"negative", -2.5, "(-2.5::float8)"},
		{"negative zero", math.Copysign(0, -1), "(-0::float8)"},
		{"zero", 0, "0::float8"},
		{"smallest subnormal", 5e-324, "5e-324::float8"},
		{"largest", math.MaxFloat64, "1.7976931348623157e+308::float8"},
		{"third", 1.0 / 3, "0.3333333333333333::float8"},
		{"tiny negative", -1.2345678901234568e-300, "(-1.2345678901234568e-300::float8)"},
		{"two to the 53 plus 2", 9007199254740994, "9.007199254740994e+15::float8"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := float8Lit(c.v)
			if got != c.text {
				t.Errorf("float8Lit(%v) = %s, want %s", c.v, got, c.text)
			}
			s := strings.TrimSuffix(strings.TrimSuffix(strings.TrimPrefix(got, "("), ")"), "::float8")
			back, err := strconv.ParseFloat(s, 64)
			if err != nil || math.Float64bits(back) != math.Float64bits(c.v) {
				t.Errorf("%s reads back as %v (%v), want the bits of %v", got, back, err, c.v)
			}
		})
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for range 10000 {
		v := math.Float64frombits(rng.Uint64())
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		s := strings.TrimSuffix(strings.TrimSuffix(strings.TrimPrefix(float8Lit(v), "("), ")"), "::float8")
		if back, err := strconv.ParseFloat(s, 64); err != nil || math.Float64bits(back) != math.Float64bits(v) {
			t.Fatalf("%v: literal %s reads back as %v (%v)", v, s, back, err)
		}
	}
}

// TestExpOneThreshold: T is where Go's math.Exp stops rounding to 1
// (−2⁻⁵⁴ with round-to-nearest, common practice), and Exp is monotone
// around it, so "l − G ≥ T" and "math.Exp(l − G) == 1" agree.
func TestExpOneThreshold(t *testing.T) {
	tt := expOneThreshold()
	if math.Exp(tt) != 1 || math.Exp(math.Nextafter(tt, -1)) == 1 {
		t.Fatalf("T = %v: Exp(T) = %v, Exp(next below) = %v", tt, math.Exp(tt), math.Exp(math.Nextafter(tt, -1)))
	}
	if tt != -0x1p-54 {
		t.Errorf("T = %v, want −2⁻⁵⁴ = %v", tt, -0x1p-54)
	}
	// Scan 2²⁰ values on each side, in ulp steps near T and wider below.
	x := tt
	for range 1 << 20 {
		x = math.Nextafter(x, -1)
		if math.Exp(x) == 1 {
			t.Fatalf("Exp(%v) = 1 below T", x)
		}
	}
	for x := tt; x < 0; x = x * 0.999 {
		if math.Exp(x) != 1 {
			t.Fatalf("Exp(%v) = %v above T", x, math.Exp(x))
		}
		if x > -1e-300 {
			break
		}
	}
	for _, x := range []float64{-1e-3, -1e-10, -0x1p-52, -0x1p-53 - 0x1p-60} {
		if math.Exp(x) == 1 {
			t.Errorf("Exp(%v) = 1", x)
		}
	}
}

// TestFunctionModelMisuse: inconsistent models panic with the package
// prefix.
func TestFunctionModelMisuse(t *testing.T) {
	v := Version{"assort", "m", 1}
	base := smallMixture(false)
	cases := []struct {
		name   string
		modify func(*FunctionModel)
		want   string
	}{
		{"unknown method", func(fm *FunctionModel) { fm.Method = "dbscan" }, "unknown method"},
		{"no features", func(fm *FunctionModel) { fm.Features = nil }, "0 features"},
		{"short centres", func(fm *FunctionModel) { fm.Centers = fm.Centers[:3] }, "Centers has 3 values, want 4"},
		{"NaN constant", func(fm *FunctionModel) { fm.LogNorm = []float64{math.NaN(), 0} }, "LogNorm[0] is NaN"},
		{"infinite factor", func(fm *FunctionModel) { fm.Chol = []float64{1, 0, 1, math.Inf(1), 0, 1} }, "Chol[3] is +Inf"},
		{"zero spread", func(fm *FunctionModel) { fm.Scale, fm.Center, fm.Spread = true, []float64{0, 0}, []float64{1, 0} }, "Spread[1] is 0"},
		{"unknown form", func(fm *FunctionModel) { fm.Form = "fast" }, "unknown form"},
		{"huge inline", func(fm *FunctionModel) { *fm = randomMixture(16, 20, false, 3); fm.Form = formInline }, "would write"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			fm := base
			fm.Features = slices.Clone(base.Features)
			c.modify(&fm)
			defer func() {
				r := recover()
				s, ok := r.(string)
				if !ok || !strings.HasPrefix(s, "schema: ") || !strings.Contains(s, c.want) {
					t.Errorf("recovered %v, want a schema: panic about %q", r, c.want)
				}
			}()
			FunctionsDDL(v, fm)
		})
	}
}

// TestFunctionForms checks which form the costs choose for models of
// several sizes (the choices BenchmarkScoringFunctions measured to be the
// fastest) and that the DDL stays small: the size of every version's
// statements is logged, and bounded.
func TestFunctionForms(t *testing.T) {
	km := func(d, k int) FunctionModel {
		fm := randomMixture(d, k, false, 5)
		fm.Method, fm.Chol, fm.InvDiag, fm.LogNorm = "kmeans", nil, nil, nil
		return fm
	}
	cases := []struct {
		name     string
		fm       FunctionModel
		form     string // of the cluster function
		maxBytes int
	}{
		{"kmeans d3 k4", km(3, 4), formInline, 20 << 10},
		{"kmeans d16 k20", km(16, 20), formSplit, 200 << 10},
		{"gmm diag d3 k4", randomMixture(3, 4, true, 5), formInline, 100 << 10},
		{"gmm diag d8 k8", randomMixture(8, 8, true, 5), formSplit, 200 << 10},
		{"gmm full d2 k2", randomMixture(2, 2, false, 5), formInline, 50 << 10},
		{"gmm full d5 k4", randomMixture(5, 4, false, 5), formSplit, 400 << 10},
		{"gmm full d8 k8", randomMixture(8, 8, false, 5), formChain, 150 << 10},
		{"gmm full d16 k20", randomMixture(16, 20, false, 5), formChain, 1 << 20},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			v := Version{"assort", "galaxies", 12}
			exprs, scores := scoringExprs(c.fm)
			p := planFunction(exprs[FuncCluster], scores, len(c.fm.Features), helperFunction(v, FuncCluster), "")
			if p.form != c.form {
				t.Errorf("cluster function written %s, want %s", p.form, c.form)
			}
			size := 0
			for _, s := range FunctionsDDL(v, c.fm) {
				size += len(s)
			}
			t.Logf("%s: cluster function %s; DDL of the version %d bytes", c.name, p.form, size)
			if size > c.maxBytes {
				t.Errorf("DDL of %d bytes, want at most %d", size, c.maxBytes)
			}
		})
	}
}

// TestFunctionNames: the longest names fit PostgreSQL's 63 bytes, and the
// names of two models never meet (every name is the model's plus a suffix
// that no model name can end with).
func TestFunctionNames(t *testing.T) {
	long := strings.Repeat("m", 40)
	v := Version{"assort", long, 999999}
	for _, o := range FunctionOutputs("gmm") {
		for _, id := range []string{v.Function(o)[1], helperFunction(v, o)[1], StableFunction("assort", long, o)[1]} {
			if len(id) > 63 {
				t.Errorf("%s: %d bytes", id, len(id))
			}
		}
	}
	names := map[string]string{}
	for _, model := range []string{"pops", "pops_v1", "pops_cluster", "pops_log", "pops_v1_cluster", "p"} {
		if ValidateModelName(model) != nil {
			continue
		}
		for _, o := range FunctionOutputs("gmm") {
			for n := 1; n <= 2; n++ {
				v := Version{"assort", model, n}
				for _, id := range []string{v.Function(o)[1], helperFunction(v, o)[1], StableFunction("assort", model, o)[1]} {
					if other, ok := names[id]; ok && other != model {
						t.Errorf("%s belongs to models %s and %s", id, other, model)
					}
					names[id] = model
				}
			}
		}
	}
}
