package main

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio/dbtest"
	"assort/fit"
	"assort/schema"
)

// sfFeatures are the feature columns of the scoring-function tests; the
// odd names check that arguments are quoted.
var sfFeatures = []string{"g_r", "r i", "Iz"}

// sfCentres are the centres of sfCatalogue's groups.
var sfCentres = [][3]float64{{0, 0, 0}, {6, 1, -20}, {1, 7, 30}, {8, 8, 80}}

// sfCatalogue creates table name(id bigint, g_r, "r i", "Iz" float8) with
// four groups of correlated rows (sizes given), the third feature on a
// scale ten times the others, deterministic for a seed.
func sfCatalogue(t testing.TB, conn *pgx.Conn, schemaName, name string, sizes []int, seed uint64) {
	t.Helper()
	ctx := context.Background()
	cols := make([]string, len(sfFeatures))
	for i, f := range sfFeatures {
		cols[i] = pgx.Identifier{f}.Sanitize() + " float8"
	}
	if _, err := conn.Exec(ctx, "CREATE TABLE "+pgx.Identifier{schemaName, name}.Sanitize()+" (id bigint PRIMARY KEY, "+strings.Join(cols, ", ")+")"); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 7))
	centres := sfCentres
	var rows [][]any
	id := int64(1)
	for g, n := range sizes {
		s := 0.6 + 0.3*float64(g)
		for range n {
			a, b, c := rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()
			x := centres[g][0] + s*a
			y := centres[g][1] + s*(0.6*a+0.8*b)
			z := centres[g][2] + 10*s*(-0.3*a+0.4*b+0.9*c)
			rows = append(rows, []any{id, x, y, z})
			id++
		}
	}
	if _, err := conn.CopyFrom(ctx, pgx.Identifier{schemaName, name}, append([]string{"id"}, sfFeatures...), pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
}

// sfFunctionModel builds the scoring functions' model of a stored version
// from its registry rows, components in cluster order as storedModel
// scores them: fitted centres for k-means, and for mixtures the factors of
// the restored fitted-space mixture, which it also returns.
func sfFunctionModel(t testing.TB, conn *pgx.Conn, schemaName, name string, version int) (schema.FunctionModel, *fit.MixtureResult) {
	t.Helper()
	m, comps, err := schema.Registry{Schema: schemaName}.Model(context.Background(), conn, name, version)
	if err != nil {
		t.Fatal(err)
	}
	fm, err := functionModel(m, comps)
	if err != nil {
		t.Fatal(err)
	}
	if m.Method != "gmm" {
		return fm, nil
	}
	mx, err := restoreMixture(m, comps)
	if err != nil {
		t.Fatal(err)
	}
	return fm, mx
}

// sfCreate runs FunctionsDDL (and StableFunctionsDDL when stable) for fm.
func sfCreate(t testing.TB, conn *pgx.Conn, v schema.Version, fm schema.FunctionModel, stable bool) {
	t.Helper()
	stmts := schema.FunctionsDDL(v, fm)
	if stable {
		stmts = append(stmts, schema.StableFunctionsDDL(v, fm)...)
	}
	for _, s := range stmts {
		if _, err := conn.Exec(context.Background(), s); err != nil {
			t.Fatalf("%s: %v", sfFirstLine(s), err)
		}
	}
}

func sfFirstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		return s[:i]
	}
	return s
}

// sfCall is the SQL call of function id on the feature columns of alias.
func sfCall(id pgx.Identifier, alias string) string {
	args := make([]string, len(sfFeatures))
	for i, f := range sfFeatures {
		args[i] = alias + "." + pgx.Identifier{f}.Sanitize()
	}
	return id.Sanitize() + "(" + strings.Join(args, ", ") + ")"
}

// sfFunc names output of a version, or its forwarder when stable.
func sfFunc(v schema.Version, output string, stable bool) pgx.Identifier {
	if stable {
		return schema.StableFunction(v.Schema, v.Model, output)
	}
	return v.Function(output)
}

// TestScoringFunctionsAgree fits models with assort fit, builds their SQL
// scoring functions from the registry as the write transaction will, and
// checks that on every row the functions give the result table's cluster
// exactly and its probability and log density within 1e-9 (the result
// table is the Go scoring's own output), in every form the generator can
// write and through the stable forwarders. Then it checks rows the fit
// never saw against the Go scoring itself (fit.Assign, or Posterior of the
// restored mixture), as `assort score` scores them: far outliers (where
// all exp terms but one underflow), the group centres and midpoints, and
// pairs of rows on either side of Go's decision boundaries (sfEdges),
// which arithmetic differing from Go's by a single rounding would label
// differently (summing the squares in reverse, or scaling by a
// reciprocal, makes this test fail).
func TestScoringFunctionsAgree(t *testing.T) {
	w := newWorkspace(t)
	sfCatalogue(t, w.conn, w.schema, "pts", []int{1500, 1200, 900, 600}, 11)
	cols := make([]string, len(sfFeatures))
	for i, f := range sfFeatures {
		cols[i] = pgx.Identifier{f}.Sanitize()
	}
	query := "SELECT id, " + strings.Join(cols, ", ") + " FROM " + w.table("pts")
	probes := sfProbes(t, w)
	cases := []struct {
		name, method, cov, scale string
	}{
		{"km_none", "kmeans", "", "none"},
		{"km_std", "kmeans", "", "standard"},
		{"full_none", "gmm", "full", "none"},
		{"full_std", "gmm", "full", "standard"},
		{"diag_none", "gmm", "diag", "none"},
		{"diag_std", "gmm", "diag", "standard"},
		{"sph_none", "gmm", "spherical", "none"},
		{"sph_std", "gmm", "spherical", "standard"},
		{"pooled_none", "gmm", "pooled", "none"},
		{"pooled_std", "gmm", "pooled", "standard"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			args := []string{"fit", c.name, "--query", query, "--key", "id", "--k", "4", "--seed", "3", "--method", c.method, "--scale", c.scale, "--restarts", "2"}
			if c.cov != "" {
				args = append(args, "--covariance", c.cov)
			}
			mustAssort(t, w.args(args...)...)
			fm, mx := sfFunctionModel(t, w.conn, w.schema, c.name, 1)
			// Segments between the group centres and between random
			// rows of the spread of the data.
			var ends [][]float64
			rng := rand.New(rand.NewPCG(31, 32))
			for a := range sfCentres {
				for b := range a {
					ends = append(ends, sfCentres[a][:], sfCentres[b][:])
				}
			}
			for range 150 {
				for range 2 {
					ends = append(ends, []float64{rng.Float64()*12 - 2, rng.Float64()*12 - 2, rng.Float64()*120 - 30})
				}
			}
			edges := sfEdges(fm, mx, ends)
			if len(edges) < 10*3*2 {
				t.Fatalf("only %d boundary rows found", len(edges)/3)
			}
			sfTable(t, w, "edges_"+c.name, edges)
			for _, form := range []string{"", "inline", "split", "chain"} {
				v := schema.Version{Schema: w.schema, Model: c.name, N: 1}
				if form != "" {
					v.Model = c.name + "_" + form
				}
				fm.Form = form
				// The default form is what assort fit itself created, with
				// the stable forwarders it published; the others are made
				// here.
				if form != "" {
					sfCreate(t, w.conn, v, fm, false)
				}
				for _, stable := range []bool{false, true} {
					if stable && form != "" {
						continue
					}
					label := fmt.Sprintf("form %q, stable %v", form, stable)
					sfCheckResults(t, w, v, c.name+"_v1", c.method, stable, label)
					sfCheckProbes(t, w, v, fm, mx, "probes", probes, stable, label)
					sfCheckProbes(t, w, v, fm, mx, "edges_"+c.name, edges, stable, label+", boundary rows")
				}
			}
		})
	}
}

// sfCheckResults compares the functions of v with the result table.
func sfCheckResults(t *testing.T, w *workspace, v schema.Version, results, method string, stable bool, label string) {
	t.Helper()
	sel := "count(*), count(*) FILTER (WHERE " + sfCall(sfFunc(v, schema.FuncCluster, stable), "p") + " IS DISTINCT FROM r.cluster)"
	if method == "gmm" {
		sel += ", max(abs(" + sfCall(sfFunc(v, schema.FuncProbability, stable), "p") + " - r.probability))" +
			", max(abs(" + sfCall(sfFunc(v, schema.FuncLogDensity, stable), "p") + " - r.log_density))"
	} else {
		sel += ", 0::float8, 0::float8"
	}
	var n, bad int
	var dp, dl float64
	q := "SELECT " + sel + " FROM " + w.table("pts") + " p JOIN " + w.table(results) + " r USING (id)"
	if err := w.conn.QueryRow(context.Background(), q).Scan(&n, &bad, &dp, &dl); err != nil {
		t.Fatalf("%s: %v", label, err)
	}
	if n != 4200 || bad != 0 || !(dp <= 1e-9) || !(dl <= 1e-9) {
		t.Errorf("%s: %d rows joined (want 4200), %d clusters differ from the result table (want 0), probability off by up to %g, log density by %g (want ≤ 1e-9)",
			label, n, bad, dp, dl)
	}
	t.Logf("%s: %d rows, largest differences: probability %g, log density %g", label, n, dp, dl)
}

// sfProbes makes table probes(id, features) of rows the fit did not see:
// far outliers (where every exp term but the largest underflows), the
// group centres, rows halfway between them and rows with a coordinate of
// exactly zero. It returns the rows, row-major.
func sfProbes(t *testing.T, w *workspace) []float64 {
	t.Helper()
	rng := rand.New(rand.NewPCG(21, 22))
	centres := sfCentres
	var x []float64
	for i := range 300 {
		s := 50.0
		if i%3 == 0 {
			s = 500
		}
		x = append(x, rng.NormFloat64()*s, rng.NormFloat64()*s, rng.NormFloat64()*s*10)
	}
	for a := range centres {
		x = append(x, centres[a][:]...)
		for b := range a {
			for f := range 3 {
				x = append(x, (centres[a][f]+centres[b][f])/2)
			}
		}
	}
	x = append(x, 0, 0, 0, 0, 5, 0, 3, 0, 0)
	sfTable(t, w, "probes", x)
	return x
}

// sfTable creates table name(id, features) holding rows (row-major).
func sfTable(t *testing.T, w *workspace, name string, x []float64) {
	t.Helper()
	d := len(sfFeatures)
	rows := make([][]any, len(x)/d)
	for i := range rows {
		rows[i] = []any{int64(i + 1)}
		for _, v := range x[i*d : (i+1)*d] {
			rows[i] = append(rows[i], v)
		}
	}
	cols := make([]string, d)
	for i, f := range sfFeatures {
		cols[i] = pgx.Identifier{f}.Sanitize() + " float8"
	}
	w.exec(t, "CREATE TABLE "+w.table(name)+" (id bigint PRIMARY KEY, "+strings.Join(cols, ", ")+")")
	if _, err := w.conn.CopyFrom(context.Background(), pgx.Identifier{w.schema, name}, append([]string{"id"}, sfFeatures...), pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
}

// sfGoLabel is the Go scoring's cluster number of one row (original
// units), as storedModel computes it.
func sfGoLabel(fm schema.FunctionModel, mx *fit.MixtureResult, row []float64) int {
	y := slices.Clone(row)
	if fm.Scale {
		fit.Scaling{Center: fm.Center, Spread: fm.Spread}.Apply(y, y)
	}
	if mx == nil {
		j, _ := fit.Nearest(fm.Centers, len(y), y)
		return fm.Numbers[j]
	}
	j, _, _, _ := mx.Posterior(make([]float64, mx.K), y)
	return fm.Numbers[j]
}

// sfEdges returns rows on both sides of the Go scoring's decision
// boundaries: along each segment from ends[2i] to ends[2i+1] (points in
// original units) whose ends get different clusters, bisection on the
// segment's parameter finds two adjacent float64 values whose rows Go
// labels differently. A function whose arithmetic differs from Go's by one
// rounding would move such a boundary and label one of the pair otherwise.
func sfEdges(fm schema.FunctionModel, mx *fit.MixtureResult, ends [][]float64) []float64 {
	var out []float64
	at := func(a, b []float64, s float64) []float64 {
		r := make([]float64, len(a))
		for f := range a {
			r[f] = a[f] + s*(b[f]-a[f])
		}
		return r
	}
	for i := 0; i+1 < len(ends); i += 2 {
		a, b := ends[i], ends[i+1]
		lo, hi := 0.0, 1.0
		la := sfGoLabel(fm, mx, at(a, b, lo))
		if la == sfGoLabel(fm, mx, at(a, b, hi)) {
			continue
		}
		for math.Nextafter(lo, hi) < hi {
			mid := lo + (hi-lo)/2
			if mid == lo || mid == hi {
				break
			}
			if sfGoLabel(fm, mx, at(a, b, mid)) == la {
				lo = mid
			} else {
				hi = mid
			}
		}
		out = append(out, at(a, b, lo)...)
		out = append(out, at(a, b, hi)...)
	}
	return out
}

// sfCheckProbes scores the rows of table (which holds probes) in Go, as
// storedModel does, and with the functions of v, and compares.
func sfCheckProbes(t *testing.T, w *workspace, v schema.Version, fm schema.FunctionModel, mx *fit.MixtureResult, table string, probes []float64, stable bool, label string) {
	t.Helper()
	d := len(fm.Features)
	n := len(probes) / d
	y := slices.Clone(probes)
	if fm.Scale {
		fit.Scaling{Center: fm.Center, Spread: fm.Spread}.Apply(y, y)
	}
	want := make([]int, n)
	var wantP, wantL []float64
	if mx == nil {
		labels := make([]int32, n)
		fit.Assign(labels, nil, fm.Centers, d, y)
		for i, l := range labels {
			want[i] = fm.Numbers[l]
		}
	} else {
		dst := make([]float64, mx.K)
		wantP, wantL = make([]float64, n), make([]float64, n)
		for i := range n {
			var l int
			l, wantP[i], wantL[i], _ = mx.Posterior(dst, y[i*d:(i+1)*d])
			want[i] = fm.Numbers[l]
		}
	}
	sel := sfCall(sfFunc(v, schema.FuncCluster, stable), "p")
	if mx != nil {
		sel += ", " + sfCall(sfFunc(v, schema.FuncProbability, stable), "p") + ", " + sfCall(sfFunc(v, schema.FuncLogDensity, stable), "p")
	} else {
		sel += ", 0::float8, 0::float8"
	}
	rows, err := w.conn.Query(context.Background(), "SELECT id, "+sel+" FROM "+w.table(table)+" p ORDER BY id")
	if err != nil {
		t.Fatalf("%s: probes: %v", label, err)
	}
	got, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) ([4]float64, error) {
		var id int64
		var c int
		var p, l float64
		err := r.Scan(&id, &c, &p, &l)
		return [4]float64{float64(id), float64(c), p, l}, err
	})
	if err != nil {
		t.Fatalf("%s: probes: %v", label, err)
	}
	if len(got) != n {
		t.Fatalf("%s: %d probe rows scored, want %d", label, len(got), n)
	}
	bad := 0
	for i, g := range got {
		ok := int(g[1]) == want[i]
		if mx != nil {
			ok = ok && math.Abs(g[2]-wantP[i]) <= 1e-9 && math.Abs(g[3]-wantL[i]) <= 1e-9*max(1, math.Abs(wantL[i]))
		}
		if !ok {
			bad++
			if bad <= 5 {
				t.Errorf("%s: probe %d at %v: SQL (%v, %v, %v), Go (%d, %v, %v)", label, i+1, probes[i*d:(i+1)*d], g[1], g[2], g[3], want[i], sfAt(wantP, i), sfAt(wantL, i))
			}
		}
	}
	if bad > 0 {
		t.Errorf("%s: %d of %d probe rows disagree with the Go scoring", label, bad, n)
	}
}

func sfAt(s []float64, i int) float64 {
	if s == nil {
		return 0
	}
	return s[i]
}

// TestScoringFunctionsTies checks the tie rules against the Go scoring on
// synthetic models (constants invented for the test): a k-means model and
// a mixture whose first and third components are identical, so that every
// row ties between them and Go keeps the first; and a mixture built so
// that at its mean two components' l differ by less than 2⁻⁵⁴ with the
// later one larger, where Posterior's label is the earlier one
// (exp(l − max l) rounds to 1 for both) although the larger l is the
// later one's.
func TestScoringFunctionsTies(t *testing.T) {
	w := newWorkspace(t)
	rng := rand.New(rand.NewPCG(41, 42))
	var rows []float64
	for range 300 {
		rows = append(rows, rng.NormFloat64()*4, rng.NormFloat64()*4, rng.NormFloat64()*40)
	}
	sfTable(t, w, "tie_rows", rows)

	km := schema.FunctionModel{
		Method: "kmeans", Features: sfFeatures, Numbers: []int{5, 7, 9},
		Scale: true, Center: []float64{0.5, -1, 10}, Spread: []float64{2, 0.75, 12},
		Centers: []float64{0.1, 0.2, -0.3, 1.5, -2, 1, 0.1, 0.2, -0.3},
	}
	cov := func(a, b, c float64) []float64 { return []float64{a, 0.1, 0, 0.1, b, 0.05, 0, 0.05, c} }
	dup, err := fit.RestoreMixture(fit.CovFull, 3, []float64{0.3, 0.4, 0.3},
		[]float64{0.1, 0.2, -0.3, 1.5, -2, 1, 0.1, 0.2, -0.3}, slices.Concat(cov(1, 2, 1.5), cov(0.5, 0.7, 2), cov(1, 2, 1.5)))
	if err != nil {
		t.Fatal(err)
	}
	gm := sfMixtureModel(dup, []int{5, 7, 9}, false)
	near, nearRow := sfNearTie(t)
	sfTable(t, w, "near_row", nearRow)
	nm := sfMixtureModel(near, []int{2, 1, 3}, false)

	cases := []struct {
		name  string
		fm    schema.FunctionModel
		mx    *fit.MixtureResult
		table string
		rows  []float64
	}{
		{"kmeans_dup", km, nil, "tie_rows", rows},
		{"gmm_dup", gm, dup, "tie_rows", rows},
		{"gmm_near", nm, near, "near_row", nearRow},
	}
	for _, c := range cases {
		for _, form := range []string{"inline", "split", "chain"} {
			c.fm.Form = form
			v := schema.Version{Schema: w.schema, Model: c.name + "_" + form, N: 1}
			sfCreate(t, w.conn, v, c.fm, false)
			sfCheckProbes(t, w, v, c.fm, c.mx, c.table, c.rows, false, c.name+" "+form)
		}
	}
	// The duplicated component never wins.
	for _, c := range cases[:2] {
		var n int
		v := schema.Version{Schema: w.schema, Model: c.name + "_chain", N: 1}
		w.scalar(t, "SELECT count(*) FROM "+w.table("tie_rows")+" p WHERE "+sfCall(v.Function(schema.FuncCluster), "p")+" = 9", &n)
		if n != 0 {
			t.Errorf("%s: %d rows got the later of two identical components", c.name, n)
		}
	}
}

// sfMixtureModel is the FunctionModel of an unscaled mixture.
func sfMixtureModel(mx *fit.MixtureResult, numbers []int, scale bool) schema.FunctionModel {
	fm := schema.FunctionModel{Method: "gmm", Features: sfFeatures, Numbers: numbers, Centers: mx.Means}
	fm.Chol, fm.InvDiag, fm.LogNorm, fm.Diagonal = mx.Factors()
	return fm
}

// sfNearTie searches for a diagonal mixture and a row where components 0
// and 1 (same mean, third variances a few ulps apart) have
// 0 < l_1 − l_0 ≤ 2⁻⁵⁴ and Posterior labels the row 0. l is computed from
// Factors as fit's TestFactorsRepeatPosterior shows Posterior computes it.
func sfNearTie(t *testing.T) (*fit.MixtureResult, []float64) {
	t.Helper()
	// ln π − 1.5 ln 2π − 1.5 ln v ≈ 0.2 for π = 0.45: |l| < 0.25 near the
	// mean, where l has ulps of 2⁻⁵⁵ and a gap of 2⁻⁵⁴ is two of them.
	v := math.Exp((math.Log(0.45) - 1.5*math.Log(2*math.Pi) - 0.2) / 1.5)
	mu := []float64{0.1, 0.2, 0.3}
	rng := rand.New(rand.NewPCG(43, 44))
	l := func(mx *fit.MixtureResult, y []float64, j int) float64 {
		_, inv, logNorm, _ := mx.Factors()
		var m float64
		for a := range y {
			z := (y[a] - mx.Means[j*3+a]) * inv[j*3+a]
			m += z * z
		}
		return logNorm[j] - 0.5*m
	}
	vb := v
	for range 200 {
		vb = math.Nextafter(vb, 1)
		covs := slices.Concat(
			[]float64{v, 0, 0, 0, v, 0, 0, 0, v},
			[]float64{v, 0, 0, 0, v, 0, 0, 0, vb},
			[]float64{1, 0, 0, 0, 1, 0, 0, 0, 1})
		mx, err := fit.RestoreMixture(fit.CovDiag, 3, []float64{0.45, 0.45, 0.1}, slices.Concat(mu, mu, []float64{9, 9, 9}), covs)
		if err != nil {
			t.Fatal(err)
		}
		for range 2000 {
			y := []float64{mu[0], mu[1], mu[2] + rng.Float64()*0.6 - 0.3}
			if dl := l(mx, y, 1) - l(mx, y, 0); dl > 0 && dl <= 0x1p-54 {
				if label, _, _, _ := mx.Posterior(make([]float64, 3), y); label == 0 {
					return mx, y
				}
			}
		}
	}
	t.Fatal("no near tie found")
	return nil, nil
}

// TestScoringFunctionLiterals checks that the model's constants reach
// the server with their exact bits: a one-component mixture whose mean is
// the row scored has l = logNorm exactly (every z is 0, so the sum of
// squares is 0), and log_density = l + ln 1 = logNorm; a mean literal off
// by one ulp would leave a z of about 1e134 (InvDiag is 1e150).
func TestScoringFunctionLiterals(t *testing.T) {
	w := newWorkspace(t)
	values := []float64{0.1, -0.1, 1.0 / 3, 0, 5e-324, -5e-324, 2.2250738585072014e-308, math.MaxFloat64, -math.MaxFloat64,
		1e-5, -1.2345678901234567e-300, 123456789.123, math.Pi, 1e22, 9007199254740993}
	means := []float64{-0.0, 5e-324, 0.1, -1.0 / 3, 1e300, -2.5e-308, 1e-7}
	for i, v := range values {
		for j := 0; j+3 <= len(means); j += 2 {
			mu := means[j : j+3]
			fm := schema.FunctionModel{Method: "gmm", Features: sfFeatures, Numbers: []int{1}, Centers: mu,
				Diagonal: true, Chol: []float64{1, 0, 1, 0, 0, 1}, InvDiag: []float64{1e150, 1e150, 1e150}, LogNorm: []float64{v}, Form: "inline"}
			ver := schema.Version{Schema: w.schema, Model: "lit", N: i*100 + j + 1}
			sfCreate(t, w.conn, ver, fm, false)
			var got float64
			w.scalar(t, "SELECT "+ver.Function(schema.FuncLogDensity).Sanitize()+"($1, $2, $3)", &got, mu[0], mu[1], mu[2])
			if got != v || (v != 0 && math.Float64bits(got) != math.Float64bits(v)) {
				t.Errorf("logNorm %v (bits %x), means %v: log_density %v (bits %x)", v, math.Float64bits(v), mu, got, math.Float64bits(got))
			}
		}
	}
}

// TestScoringFunctionsNonFinite: a NULL, NaN or infinite feature gives
// NULL from every function in every form, and a finite row does not.
func TestScoringFunctionsNonFinite(t *testing.T) {
	w := newWorkspace(t)
	mx, err := fit.RestoreMixture(fit.CovFull, 3, []float64{0.5, 0.5}, []float64{0, 0, 0, 3, 3, 3},
		[]float64{1, 0.2, 0, 0.2, 1, 0, 0, 0, 1, 2, 0, 0, 0, 2, 0, 0, 0, 2})
	if err != nil {
		t.Fatal(err)
	}
	models := map[string]schema.FunctionModel{
		"km": {Method: "kmeans", Features: sfFeatures, Numbers: []int{1, 2}, Scale: true, Center: []float64{1, 1, 1}, Spread: []float64{2, 2, 2},
			Centers: []float64{0, 0, 0, 1, 1, 1}},
		"gm": sfMixtureModel(mx, []int{2, 1}, false),
	}
	bad := []string{"NULL", "'NaN'", "'Infinity'", "'-Infinity'"}
	for name, fm := range models {
		for _, form := range []string{"inline", "split", "chain"} {
			fm.Form = form
			v := schema.Version{Schema: w.schema, Model: name + "_" + form, N: 1}
			sfCreate(t, w.conn, v, fm, false)
			for _, o := range schema.FunctionOutputs(fm.Method) {
				f := v.Function(o).Sanitize()
				var isNull bool
				w.scalar(t, "SELECT "+f+"(0.5, 1.5, -2) IS NULL", &isNull)
				if isNull {
					t.Errorf("%s: NULL for a finite row", f)
				}
				for pos := range 3 {
					for _, b := range bad {
						args := []string{"0.5", "1.5", "-2"}
						args[pos] = b
						w.scalar(t, "SELECT "+f+"("+strings.Join(args, ", ")+"::float8) IS NULL", &isNull)
						if !isNull {
							t.Errorf("%s(%s): not NULL", f, strings.Join(args, ", "))
						}
					}
				}
			}
		}
	}
}

// TestScoringFunctionsRunInParallel: on a table of 200 000 rows, with
// parallel plans made free, EXPLAIN of a query that filters on a scoring
// function shows a Gather above a parallel sequential scan, for every form
// and for the stable forwarder; the inline and split forms are inlined
// (the plan names no versioned function, only the split form's helper);
// and the parallel run counts what a serial run counts.
func TestScoringFunctionsRunInParallel(t *testing.T) {
	w := newWorkspace(t)
	cols := make([]string, len(sfFeatures))
	for i, f := range sfFeatures {
		cols[i] = fmt.Sprintf("(random() * %d)::float8 AS %s", 10*(i+1), pgx.Identifier{f}.Sanitize())
	}
	w.exec(t, "SELECT setseed(0.25)")
	w.exec(t, "CREATE TABLE "+w.table("big")+" AS SELECT g AS id, "+strings.Join(cols, ", ")+" FROM generate_series(1, 200000) g")
	w.exec(t, "ANALYZE "+w.table("big"))
	mx, err := fit.RestoreMixture(fit.CovFull, 3, []float64{0.4, 0.3, 0.2, 0.1},
		[]float64{2, 5, 8, 7, 2, 20, 5, 15, 25, 8, 8, 5},
		slices.Concat(sfCov(1, 4, 9), sfCov(2, 3, 16), sfCov(4, 4, 4), sfCov(1, 1, 30)))
	if err != nil {
		t.Fatal(err)
	}
	models := []struct {
		name string
		fm   schema.FunctionModel
	}{
		{"km", schema.FunctionModel{Method: "kmeans", Features: sfFeatures, Numbers: []int{1, 2, 3, 4},
			Centers: []float64{2, 5, 8, 7, 2, 20, 5, 15, 25, 8, 8, 5}}},
		{"gm", sfMixtureModel(mx, []int{1, 2, 3, 4}, false)},
	}
	conn := w.conn
	ctx := context.Background()
	for _, m := range models {
		for _, form := range []string{"inline", "split", "chain"} {
			m.fm.Form = form
			v := schema.Version{Schema: w.schema, Model: m.name + "_" + form, N: 1}
			sfCreate(t, conn, v, m.fm, true)
			for _, stable := range []bool{false, true} {
				f := sfFunc(v, schema.FuncCluster, stable)
				// The function runs on one row in ten, to keep the test short.
				q := "SELECT count(*) FILTER (WHERE p.id % 10 = 0 AND " + sfCall(f, "p") + " = 1) FROM " + w.table("big") + " p"
				label := fmt.Sprintf("%s, form %s, stable %v", m.name, form, stable)
				for _, set := range []string{"parallel_setup_cost = 0", "parallel_tuple_cost = 0", "min_parallel_table_scan_size = 0", "max_parallel_workers_per_gather = 2"} {
					w.exec(t, "SET "+set)
				}
				var plan []map[string]any
				if err := conn.QueryRow(ctx, "EXPLAIN (VERBOSE, FORMAT JSON) "+q).Scan(&plan); err != nil {
					t.Fatalf("%s: %v", label, err)
				}
				root := plan[0]["Plan"].(map[string]any)
				gather, parallelScan := sfPlanHas(root, func(n map[string]any) bool {
					planned, _ := n["Workers Planned"].(float64)
					return strings.HasPrefix(n["Node Type"].(string), "Gather") && planned >= 1
				}), sfPlanHas(root, func(n map[string]any) bool {
					return n["Node Type"] == "Seq Scan" && n["Parallel Aware"] == true
				})
				if !gather || !parallelScan {
					t.Errorf("%s: plan has Gather with workers %v, parallel Seq Scan %v:\n%v", label, gather, parallelScan, plan)
				}
				text := fmt.Sprint(plan)
				named := strings.Contains(text, v.Function(schema.FuncCluster)[1]+"(")
				helper := strings.Contains(text, v.Function(schema.FuncCluster)[1]+"_of(")
				if want := form == "chain"; named != want || helper != (form == "split") {
					t.Errorf("%s: plan calls the versioned function %v (want %v), its helper %v", label, named, want, helper)
				}
				var par, ser int64
				if err := conn.QueryRow(ctx, q).Scan(&par); err != nil {
					t.Fatalf("%s: parallel run: %v", label, err)
				}
				w.exec(t, "SET max_parallel_workers_per_gather = 0")
				if err := conn.QueryRow(ctx, q).Scan(&ser); err != nil {
					t.Fatalf("%s: serial run: %v", label, err)
				}
				if par != ser || ser == 0 {
					t.Errorf("%s: %d rows in cluster 1 in parallel, %d serially", label, par, ser)
				}
				w.exec(t, "RESET ALL")
			}
		}
	}
}

// sfCov is a 3×3 covariance with the given variances and mild
// correlation of the first two features.
func sfCov(a, b, c float64) []float64 {
	r := 0.3 * math.Sqrt(a*b)
	return []float64{a, r, 0, r, b, 0, 0, 0, c}
}

// sfPlanHas reports whether a node of the EXPLAIN (FORMAT JSON) plan tree
// satisfies ok.
func sfPlanHas(n map[string]any, ok func(map[string]any) bool) bool {
	if ok(n) {
		return true
	}
	subs, _ := n["Plans"].([]any)
	for _, s := range subs {
		if m, isMap := s.(map[string]any); isMap && sfPlanHas(m, ok) {
			return true
		}
	}
	return false
}

// TestStableFunctionsAndDrops follows the forwarders through the publish
// cases the lead's wiring meets, and checks the drops: CREATE OR REPLACE
// moves the forwarders to a new version of the same features, also from
// k-means to a mixture; going back to k-means, or to renamed features,
// takes DropStableFunctionsDDL first, without which renamed features are
// refused (SQLSTATE 42P13); a user's view on a function makes its DROP
// fail (2BP01) rather than cascade; DropFunctionsDDL removes a version's
// functions and helpers and can run again.
func TestStableFunctionsAndDrops(t *testing.T) {
	w := newWorkspace(t)
	ctx := context.Background()
	rows := []float64{0, 0, 0, 1, 1, 1, 4, 4, 4, 9, 9, 9, 2, 7, 1}
	sfTable(t, w, "pts", rows)
	ver := func(n int) schema.Version { return schema.Version{Schema: w.schema, Model: "m", N: n} }
	km := func(c float64) schema.FunctionModel {
		return schema.FunctionModel{Method: "kmeans", Features: sfFeatures, Numbers: []int{1, 2}, Centers: []float64{0, 0, 0, c, c, c}}
	}
	mx, err := fit.RestoreMixture(fit.CovSpherical, 3, []float64{0.5, 0.5}, []float64{0, 0, 0, 5, 5, 5}, []float64{1, 0, 0, 0, 1, 0, 0, 0, 1, 2, 0, 0, 0, 2, 0, 0, 0, 2})
	if err != nil {
		t.Fatal(err)
	}
	gm := sfMixtureModel(mx, []int{2, 1}, false)
	gm.Form = "split" // with helpers, for the drops
	exec := func(stmts []string) error {
		for _, s := range stmts {
			if _, err := w.conn.Exec(ctx, s); err != nil {
				return err
			}
		}
		return nil
	}
	// clusters lists f's cluster for every row of pts.
	clusters := func(f pgx.Identifier) string {
		var s string
		w.scalar(t, "SELECT string_agg("+sfCall(f, "p")+"::text, ',' ORDER BY id) FROM "+w.table("pts")+" p", &s)
		return s
	}
	stable := schema.StableFunction(w.schema, "m", schema.FuncCluster)
	steps := []struct {
		name string
		n    int
		fm   schema.FunctionModel
		drop func() []string // before publishing
	}{
		{"v1 k-means", 1, km(1), nil},
		{"v2 k-means, other centres", 2, km(8), nil},
		{"v3 mixture, same features", 3, gm, nil},
		{"v4 back to k-means", 4, km(3), func() []string { return schema.DropStableFunctionsDDL(w.schema, "m", 3, "gmm") }},
	}
	for _, s := range steps {
		sfCreate(t, w.conn, ver(s.n), s.fm, false)
		if s.drop != nil {
			if err := exec(s.drop()); err != nil {
				t.Fatalf("%s: drop: %v", s.name, err)
			}
		}
		if err := exec(schema.StableFunctionsDDL(ver(s.n), s.fm)); err != nil {
			t.Fatalf("%s: publish: %v", s.name, err)
		}
		if got, want := clusters(stable), clusters(ver(s.n).Function(schema.FuncCluster)); got != want {
			t.Errorf("%s: forwarder gives %s, the version %s", s.name, got, want)
		}
	}
	if clusters(ver(1).Function(schema.FuncCluster)) == clusters(ver(2).Function(schema.FuncCluster)) {
		t.Fatal("versions 1 and 2 agree on every row; the test cannot tell them apart")
	}
	var left int
	w.scalar(t, "SELECT count(*) FROM pg_proc WHERE pronamespace = $1::regnamespace AND proname IN ('m_probability', 'm_log_density')", &left, w.schema)
	if left != 0 {
		t.Errorf("%d mixture forwarders left after going back to k-means", left)
	}

	// Renamed features: refused without the drop, accepted after it.
	renamed := km(2)
	renamed.Features = []string{"a", "b", "c"}
	sfCreate(t, w.conn, ver(5), renamed, false)
	var pgErr *pgconn.PgError
	if err := exec(schema.StableFunctionsDDL(ver(5), renamed)); !errors.As(err, &pgErr) || pgErr.Code != "42P13" {
		t.Errorf("publishing renamed features over the forwarder: %v, want SQLSTATE 42P13", err)
	}
	if err := exec(append(schema.DropStableFunctionsDDL(w.schema, "m", 3, "kmeans"), schema.StableFunctionsDDL(ver(5), renamed)...)); err != nil {
		t.Errorf("publishing renamed features after the drop: %v", err)
	}

	// A user's view blocks the drops, with the server's dependency error.
	w.exec(t, "CREATE VIEW "+w.table("report")+" AS SELECT id, "+sfCall(stable, "p")+" AS c, "+
		sfCall(ver(3).Function(schema.FuncCluster), "p")+" AS c3 FROM "+w.table("pts")+" p")
	for name, stmts := range map[string][]string{
		"forwarders": schema.DropStableFunctionsDDL(w.schema, "m", 3, "kmeans"),
		"version 3":  schema.DropFunctionsDDL(ver(3), 3, "gmm"),
	} {
		tx, err := w.conn.Begin(ctx)
		if err != nil {
			t.Fatal(err)
		}
		err = nil
		for _, s := range stmts {
			if _, err = tx.Exec(ctx, s); err != nil {
				break
			}
		}
		if !errors.As(err, &pgErr) || pgErr.Code != "2BP01" {
			t.Errorf("dropping the %s under a view: %v, want SQLSTATE 2BP01", name, err)
		}
		if err := tx.Rollback(ctx); err != nil {
			t.Fatal(err)
		}
	}
	w.exec(t, "DROP VIEW "+w.table("report"))

	// Drops remove everything of a version, helpers included, and repeat.
	for n := 1; n <= 5; n++ {
		d, method := 3, "kmeans"
		if n == 3 {
			method = "gmm"
		}
		for range 2 {
			if err := exec(schema.DropFunctionsDDL(ver(n), d, method)); err != nil {
				t.Fatalf("drop v%d: %v", n, err)
			}
		}
	}
	if err := exec(schema.DropStableFunctionsDDL(w.schema, "m", 3, "kmeans")); err != nil {
		t.Fatal(err)
	}
	var names string
	w.scalar(t, "SELECT coalesce(string_agg(proname, ', '), '') FROM pg_proc WHERE pronamespace = $1::regnamespace", &names, w.schema)
	if names != "" {
		t.Errorf("functions left after the drops: %s", names)
	}
}

// BenchmarkScoringFunctions measures the scoring functions per row on one
// core (no parallel workers, no JIT), for synthetic models of a few sizes
// in each form, against a baseline measured in the same run: the same
// query summing the features instead of calling a function. It is what
// schema's cost constants (chainBase, chainPerOp...) are calibrated on.
//
//	go test -run '^$' -bench ScoringFunctions ./cmd/assort/
func BenchmarkScoringFunctions(b *testing.B) {
	const n = 20000
	_, sch := dbtest.Schema(b)
	conn := dbtest.Conn(b)
	ctx := context.Background()
	features := make([]string, 8)
	cols := make([]string, 8)
	for a := range features {
		features[a] = "f" + strconv.Itoa(a)
		cols[a] = "random() * 10 AS " + features[a]
	}
	for _, s := range []string{
		"SELECT setseed(0.5)",
		"CREATE TABLE " + pgx.Identifier{sch, "bench"}.Sanitize() + " AS SELECT " + strings.Join(cols, ", ") + " FROM generate_series(1, " + strconv.Itoa(n) + ")",
		"ANALYZE " + pgx.Identifier{sch, "bench"}.Sanitize(),
		"SET jit = off",
		"SET max_parallel_workers_per_gather = 0",
	} {
		if _, err := conn.Exec(ctx, s); err != nil {
			b.Fatal(err)
		}
	}
	perRow := func(b *testing.B, expr string) float64 {
		q := "SELECT sum((" + expr + ")::float8) FROM " + pgx.Identifier{sch, "bench"}.Sanitize()
		var s float64
		for b.Loop() {
			if err := conn.QueryRow(ctx, q).Scan(&s); err != nil {
				b.Fatal(err)
			}
		}
		return float64(b.Elapsed().Nanoseconds()) / float64(b.N) / n
	}
	baseline := map[int]float64{}
	for _, d := range []int{3, 8} {
		b.Run(fmt.Sprintf("baseline/d%d", d), func(b *testing.B) {
			baseline[d] = perRow(b, strings.Join(features[:d], " + "))
			b.ReportMetric(baseline[d], "ns/row")
		})
	}
	cases := []struct {
		method string
		d, k   int
		cov    fit.Covariance
		forms  []string
	}{
		{"kmeans", 3, 4, "", []string{"", "inline", "split", "chain"}},
		{"kmeans", 8, 8, "", []string{"", "inline", "split", "chain"}},
		{"gmm", 3, 4, fit.CovDiag, []string{"", "inline", "split", "chain"}},
		{"gmm", 8, 8, fit.CovDiag, []string{"", "inline", "split", "chain"}},
		{"gmm", 3, 4, fit.CovFull, []string{"", "inline", "split", "chain"}},
		{"gmm", 8, 8, fit.CovFull, []string{"", "chain"}},
	}
	version := 0
	for _, c := range cases {
		fm := sfBenchModel(b, c.method, features[:c.d], c.k, c.cov)
		for _, form := range c.forms {
			fm.Form = form
			version++
			v := schema.Version{Schema: sch, Model: "bench", N: version}
			for _, s := range schema.FunctionsDDL(v, fm) {
				if _, err := conn.Exec(ctx, s); err != nil {
					b.Fatal(err)
				}
			}
			label := form
			if form == "" {
				label = "auto"
			}
			for _, o := range schema.FunctionOutputs(c.method) {
				name := fmt.Sprintf("%s%s/d%d_k%d/%s/%s", c.method, c.cov, c.d, c.k, o, label)
				b.Run(name, func(b *testing.B) {
					ns := perRow(b, v.Function(o).Sanitize()+"("+strings.Join(features[:c.d], ", ")+")")
					b.ReportMetric(ns, "ns/row")
					b.ReportMetric(ns/baseline[c.d], "x_baseline")
				})
			}
		}
	}
}

// sfBenchModel is a synthetic model (scaled, random constants, fixed seed)
// for the benchmark.
func sfBenchModel(b *testing.B, method string, features []string, k int, cov fit.Covariance) schema.FunctionModel {
	d := len(features)
	rng := rand.New(rand.NewPCG(uint64(d*100+k), 1))
	fm := schema.FunctionModel{Method: method, Features: features, Scale: true}
	for range d {
		fm.Center = append(fm.Center, 5)
		fm.Spread = append(fm.Spread, 3)
	}
	var weights, covs []float64
	for j := range k {
		fm.Numbers = append(fm.Numbers, j+1)
		weights = append(weights, 1/float64(k))
		for a := range d {
			fm.Centers = append(fm.Centers, rng.NormFloat64())
			for c := range d {
				v := 0.0
				if a == c {
					v = 0.5 + rng.Float64()
				} else if cov == fit.CovFull {
					v = 0.1
				}
				covs = append(covs, v)
			}
		}
	}
	if method == "kmeans" {
		return fm
	}
	mx, err := fit.RestoreMixture(cov, d, weights, fm.Centers, covs)
	if err != nil {
		b.Fatal(err)
	}
	fm.Chol, fm.InvDiag, fm.LogNorm, fm.Diagonal = mx.Factors()
	return fm
}
