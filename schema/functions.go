package schema

// SQL scoring functions: every version of a model can score rows inside
// PostgreSQL, in any query, as assort's Go scoring (cmd/assort's
// scoreStored: fit.Scaling.Apply, then fit.Assign or
// fit.(*MixtureResult).Posterior) scores them.

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"sync"

	"github.com/jackc/pgx/v5"
)

// Outputs of the scoring functions, the suffixes of their names.
const (
	FuncCluster     = "cluster"     // integer: the row's cluster number
	FuncProbability = "probability" // float8: membership of that cluster (mixtures)
	FuncLogDensity  = "log_density" // float8: ln p(x) in the fitted space (mixtures)
)

// MaxFunctionFeatures is the most features a scoring function can take:
// PostgreSQL's limit on a function's arguments (FUNC_MAX_ARGS, 100 unless
// the server was built otherwise). FunctionsDDL and StableFunctionsDDL
// panic for a model with more: the caller checks first and, for such a
// model, creates no functions (and says so).
const MaxFunctionFeatures = 100

// FunctionOutputs lists the functions a version of a model of method
// ("kmeans" or "gmm") has. It panics on another method.
func FunctionOutputs(method string) []string {
	switch method {
	case "kmeans":
		return []string{FuncCluster}
	case "gmm":
		return []string{FuncCluster, FuncProbability, FuncLogDensity}
	}
	panic(fmt.Sprintf("schema: scoring functions of unknown method %q", method))
}

// Function names version v's scoring function for output:
// S.NAME_vV_cluster and so on.
func (v Version) Function(output string) pgx.Identifier {
	return pgx.Identifier{v.Schema, v.Model + "_v" + strconv.Itoa(v.N) + "_" + output}
}

// StableFunction names the forwarder S.NAME_output that calls the published
// version's function.
func StableFunction(schema, model, output string) pgx.Identifier {
	return pgx.Identifier{schema, model + "_" + output}
}

// FunctionModel holds what the scoring functions need, all in the fitted
// space (after scaling), components in the order the Go scoring being
// mirrored holds them: the registry's cluster order for `assort score`
// (scoreStored). Ties between components go to the first in this order.
type FunctionModel struct {
	Method   string   // "kmeans" or "gmm"
	Features []string // d feature names, the functions' argument names
	Numbers  []int    // cluster number of each of the k components
	// Scale applies y_a = (x_a − Center_a) / Spread_a first; false when
	// the model's scale is "none" (then Center and Spread are unused).
	Scale          bool
	Center, Spread []float64
	Centers        []float64 // k×d: k-means centres, or mixture means
	// Mixtures only, as fit.(*MixtureResult).Factors returns them.
	Diagonal bool      // diag and spherical: z_a = (y_a − μ_a)·InvDiag_a
	Chol     []float64 // k blocks of d(d+1)/2 packed lower Cholesky factors
	InvDiag  []float64 // k×d values 1/L_aa
	LogNorm  []float64 // k values ln π − ½(d ln 2π + ln|Σ|)
	// Form forces how the bodies are written: "inline", "split" or
	// "chain" (see FunctionsDDL), for tests and benchmarks; "" chooses
	// the cheapest. Forcing a form that would be exponentially large, or
	// a split with more than MaxFunctionFeatures components, panics.
	Form string
}

// FunctionsDDL returns the statements that create version v's scoring
// functions and describe them (COMMENT), for the transaction that writes
// v. Each function takes one float8 argument per feature, named after the
// feature, in fm.Features order; it is IMMUTABLE and PARALLEL SAFE, and
// written in LANGUAGE sql with the model's constants inlined as float8
// literals that read back to the same bits:
//
//	S.NAME_vV_cluster(f1, ..., fd)      integer
//	S.NAME_vV_probability(f1, ..., fd)  float8  (mixtures)
//	S.NAME_vV_log_density(f1, ..., fd)  float8  (mixtures)
//
// What they compute, with the arithmetic of the Go scoring in the same
// order, so that every float8 result has the same bits as Go's
// (PostgreSQL's + − × ÷ are IEEE double, and the Go scoring rounds every
// product before adding it, float64(a·b), which the Go specification says
// keeps the compiler from fusing a multiply-add on any architecture):
//
//	y_a = (x_a − c_a) / s_a            (scaled models; else y_a = x_a)
//	k-means:  D_j = Σ_a (y_a − μ_ja)·(y_a − μ_ja), summed from a = 0 up;
//	          cluster = number of the first j with D_j = min D
//	mixtures: z_ja = ((y_a − μ_ja) − L_ja0 z_j0 − … − L_ja(a−1) z_j(a−1))·(1/L_jaa)
//	          (diag and spherical: z_ja = (y_a − μ_ja)·(1/L_jaa)),
//	          l_j = logNorm_j − 0.5·Σ_a z_ja·z_ja,  G = max_j l_j,
//	          S = Σ_j exp(max(l_j − G, −708)),
//	          cluster = number of the first j with l_j − G ≥ T,
//	          probability = 1/S,  log_density = G + ln S.
//
// The mixture label is the one Posterior picks: it takes the first largest
// of e_j·(1/S) with e_j = exp(l_j − G) ≤ 1, and for e_j ≤ 1 − 2⁻⁵³ that
// product rounds below 1/S, so its label is the first j with e_j = 1
// exactly; T, the most negative t with Go's math.Exp(t) = 1 (−2⁻⁵⁴ on
// amd64), tests that without calling exp, whose C library version may
// differ from Go's in the last bit. For the same reason probability and
// log_density agree with Go's to about 1e-15 rather than bit for bit.
// Terms below exp(−708) are clamped there because PostgreSQL raises an
// error when exp underflows to zero; S ≥ 1 (G's own term is 1), so the
// clamp cannot change it.
//
// A row with a NULL, NaN or infinite feature scores NULL (assort's reader
// refuses such rows). PostgreSQL checks every float8 operation, so where
// Go would round to ±Inf or to zero — features beyond about 1e150 in
// fitted units, or within about 1e-150 of a centre that is itself that
// small — the functions raise "value out of range" instead.
//
// Form. A body is written in one of three forms, whichever the costs
// (counted operations, calibrated by BenchmarkScoringFunctions) say is
// cheapest for the model:
//
//   - inline: one SQL expression, a CASE that is NULL for a non-finite
//     feature, which the planner inlines into the calling query when the
//     arguments are columns or cheap expressions (at most 10 operators
//     each; otherwise it calls the function, with the same results). Such
//     a function is not declared STRICT: PostgreSQL does not inline a
//     STRICT function whose body uses CASE, GREATEST or LEAST. The
//     expression repeats every value it uses twice (a distance, a
//     mixture's max, and in a full or pooled forward substitution every
//     z, so exponentially in d); small models only.
//   - split: the per-component scores (D_j or l_j) inline as above, passed
//     to a helper S.NAME_vV_OUTPUT_of(s1, ..., sk) that computes the rest
//     (min or max, sums, the label) once each, in the chain form.
//   - chain: the whole arithmetic as nested OFFSET 0 subqueries that
//     compute each shared value once (OFFSET 0 keeps the planner from
//     flattening them back), with a WHERE that leaves no row for a
//     non-finite feature. Linear in size, but a function with a FROM is
//     never inlined, and PostgreSQL prepares its plan again on every call,
//     at about 20 times the cost of the operations themselves.
//
// Helpers and chains are STRICT, with a COST the planner can weigh. All
// forms are exact and run in parallel workers.
//
// FunctionsDDL panics on programmer misuse: an unknown method, more than
// MaxFunctionFeatures features, slices whose lengths do not match, a
// non-finite constant, a zero spread.
func FunctionsDDL(v Version, fm FunctionModel) []string {
	fm.check()
	var out []string
	exprs, scores := scoringExprs(fm)
	d, k := len(fm.Features), len(scores)
	create := func(id pgx.Identifier, params []string, o string, b body, what string) {
		out = append(out, fmt.Sprintf("CREATE FUNCTION %s(%s) RETURNS %s\nLANGUAGE sql IMMUTABLE PARALLEL SAFE%s\nAS $fn$\n%s\n$fn$",
			id.Sanitize(), paramList(params), returnType(o), b.attrs(), b.text))
		out = append(out, fmt.Sprintf("COMMENT ON FUNCTION %s IS %s", signature(id, len(params)), quoteLiteral(what)))
	}
	for _, o := range FunctionOutputs(fm.Method) {
		p := planFunction(exprs[o], scores, d, helperFunction(v, o), fm.Form)
		if p.helper != nil {
			names := make([]string, k)
			for j := range names {
				names[j] = "s" + strconv.Itoa(j+1)
			}
			score := "squared distances to the centres"
			if fm.Method == "gmm" {
				score = "log weighted densities of the components"
			}
			create(helperFunction(v, o), names, o, *p.helper, fmt.Sprintf("Helper of %s: the %s given the %s, in the model's order",
				v.Function(o)[1], strings.ToLower(describeOutput(o)), score))
		}
		create(v.Function(o), fm.Features, o, p.main, fmt.Sprintf("%s of a row under %s (%s; features %s), computed as assort computes it",
			describeOutput(o), v, fm.Method, strings.Join(fm.Features, ", ")))
	}
	return out
}

// helperFunction names the split form's helper of v's function for output.
func helperFunction(v Version, output string) pgx.Identifier {
	id := v.Function(output)
	return pgx.Identifier{id[0], id[1] + "_of"}
}

// StableFunctionsDDL returns the statements that point the forwarders
// S.NAME_cluster (and, for mixtures, S.NAME_probability and
// S.NAME_log_density) at version v's functions, for the transaction that
// publishes v. Each forwarder is one SQL call, which the planner inlines.
// They are STABLE, not IMMUTABLE, because publishing another version
// changes their results (so no index can be built on them; use the
// versioned functions for that).
//
// They use CREATE OR REPLACE, which can change a body but not the
// arguments: when the published version's features differ from v's in
// names, the server refuses ("cannot change name of input parameter"),
// and when they differ in number it would leave the old forwarder beside
// the new one. So when the previously published version had other
// features, or another method, run DropStableFunctionsDDL with its
// feature count and method first; that DROP fails, naming the object,
// while a view or function of the database's users depends on a
// forwarder.
func StableFunctionsDDL(v Version, fm FunctionModel) []string {
	fm.check()
	var out []string
	d := len(fm.Features)
	for _, o := range FunctionOutputs(fm.Method) {
		args := make([]string, d)
		for i := range args {
			args[i] = "$" + strconv.Itoa(i+1)
		}
		id := StableFunction(v.Schema, v.Model, o)
		out = append(out, fmt.Sprintf("CREATE OR REPLACE FUNCTION %s(%s) RETURNS %s\nLANGUAGE sql STABLE PARALLEL SAFE\nAS $fn$\nSELECT %s(%s)\n$fn$",
			id.Sanitize(), paramList(fm.Features), returnType(o), v.Function(o).Sanitize(), strings.Join(args, ", ")))
		out = append(out, fmt.Sprintf("COMMENT ON FUNCTION %s IS %s", signature(id, d),
			quoteLiteral(fmt.Sprintf("%s of a row under the published version of %s (now %s)", describeOutput(o), v.Model, v))))
	}
	return out
}

// DropFunctionsDDL returns the statements that drop version v's scoring
// functions (d features, method "kmeans" or "gmm") and their helpers, for
// prune and drop. They use IF EXISTS, so they also serve versions written
// before scoring functions existed, and no CASCADE: a user's view that
// calls one makes the DROP fail (SQLSTATE 2BP01), naming it.
func DropFunctionsDDL(v Version, d int, method string) []string {
	var out []string
	for _, o := range FunctionOutputs(method) {
		out = append(out, "DROP FUNCTION IF EXISTS "+signature(v.Function(o), d),
			// The helper's arguments are one per component; its name is
			// unique in the schema, so it needs no list.
			"DROP FUNCTION IF EXISTS "+helperFunction(v, o).Sanitize())
	}
	return out
}

// DropStableFunctionsDDL returns the statements that drop model's
// forwarders, created for a version of d features and method, for dropping
// a whole model, or before publishing a version with other features or
// another method (see StableFunctionsDDL). IF EXISTS and no CASCADE, as in
// DropFunctionsDDL.
func DropStableFunctionsDDL(schema, model string, d int, method string) []string {
	var out []string
	for _, o := range FunctionOutputs(method) {
		out = append(out, "DROP FUNCTION IF EXISTS "+signature(StableFunction(schema, model, o), d))
	}
	return out
}

func returnType(output string) string {
	if output == FuncCluster {
		return "integer"
	}
	return "float8"
}

func describeOutput(output string) string {
	switch output {
	case FuncCluster:
		return "Cluster"
	case FuncProbability:
		return "Membership probability of its cluster"
	}
	return "Natural log of the mixture density (fitted space)"
}

// paramList is an argument list of float8s named names.
func paramList(names []string) string {
	ps := make([]string, len(names))
	for i, f := range names {
		ps[i] = pgx.Identifier{f}.Sanitize() + " float8"
	}
	return strings.Join(ps, ", ")
}

// signature is name(float8, ..., float8), as DROP and COMMENT want it.
func signature(id pgx.Identifier, d int) string {
	return id.Sanitize() + "(" + strings.TrimSuffix(strings.Repeat("float8, ", d), ", ") + ")"
}

// check panics unless fm is consistent and finite.
func (fm FunctionModel) check() {
	d, k := len(fm.Features), len(fm.Numbers)
	bad := func(format string, args ...any) {
		panic("schema: scoring functions: " + fmt.Sprintf(format, args...))
	}
	if d < 1 || k < 1 || d > MaxFunctionFeatures {
		bad("%d features and %d components (at most %d features)", d, k, MaxFunctionFeatures)
	}
	FunctionOutputs(fm.Method)
	finite := func(name string, s []float64, n int) {
		if len(s) != n {
			bad("%s has %d values, want %d", name, len(s), n)
		}
		for i, x := range s {
			if math.IsNaN(x) || math.IsInf(x, 0) {
				bad("%s[%d] is %v", name, i, x)
			}
		}
	}
	if fm.Scale {
		finite("Center", fm.Center, d)
		finite("Spread", fm.Spread, d)
		for i, s := range fm.Spread {
			if s == 0 {
				bad("Spread[%d] is 0", i)
			}
		}
	}
	finite("Centers", fm.Centers, k*d)
	if fm.Method == "gmm" {
		finite("Chol", fm.Chol, k*d*(d+1)/2)
		finite("InvDiag", fm.InvDiag, k*d)
		finite("LogNorm", fm.LogNorm, k)
	}
}

// float8Lit writes v as a float8 literal that reads back to the same bits:
// the shortest decimal that round-trips (strconv's 'g', -1), cast to
// float8; a negative value (−0 included) is the negation of its magnitude,
// in parentheses so that no operator can swallow the sign.
func float8Lit(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		panic(fmt.Sprintf("schema: float8 literal of %v", v))
	}
	if math.Signbit(v) {
		return "(-" + strconv.FormatFloat(-v, 'g', -1, 64) + "::float8)"
	}
	return strconv.FormatFloat(v, 'g', -1, 64) + "::float8"
}

// expOneThreshold is T, the most negative t with math.Exp(t) == 1, found
// by bisection over the bit patterns of t in [−2⁻³⁰, 0] (math.Exp is
// monotone there; TestExpOneThreshold checks the neighbourhood).
var expOneThreshold = sync.OnceValue(func() float64 {
	lo, hi := uint64(0), math.Float64bits(0x1p-30) // magnitudes: Exp(−lo) == 1, Exp(−hi) < 1
	for lo+1 < hi {
		mid := lo + (hi-lo)/2
		if math.Exp(-math.Float64frombits(mid)) == 1 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return -math.Float64frombits(lo)
})

// scoringExprs builds the arithmetic of every output of fm as one graph of
// shared nodes, in the Go scoring's order of operations, and returns the
// per-component scores every output starts from: k-means' squared
// distances D_j, or a mixture's l_j.
func scoringExprs(fm FunctionModel) (outputs map[string]*fnode, scores []*fnode) {
	d, k := len(fm.Features), len(fm.Numbers)
	y := make([]*fnode, d)
	for a := range d {
		y[a] = param(a + 1)
		if fm.Scale {
			y[a] = binary(binary(y[a], "-", num(fm.Center[a])), "/", num(fm.Spread[a]))
		}
	}
	// sumSquares is ((v0·v0 + v1·v1) + …), Go's s += v·v from s = 0.
	sumSquares := func(v []*fnode) *fnode {
		s := binary(v[0], "*", v[0])
		for _, t := range v[1:] {
			s = binary(s, "+", binary(t, "*", t))
		}
		return s
	}
	if fm.Method == "kmeans" {
		dist := make([]*fnode, k)
		for j := range k {
			t := make([]*fnode, d)
			for a := range d {
				t[a] = binary(y[a], "-", num(fm.Centers[j*d+a]))
			}
			dist[j] = sumSquares(t)
		}
		// CASE min WHEN D_1 THEN n_1 …: the first j whose distance is the
		// minimum, as Assign's strict < keeps the first.
		parts := []string{"CASE ", ""}
		args := []*fnode{call("LEAST", dist...)}
		for j := range k {
			parts[len(parts)-1] += "\n  WHEN "
			parts = append(parts, " THEN "+strconv.Itoa(fm.Numbers[j]))
			args = append(args, dist[j])
		}
		parts[len(parts)-1] += "\nEND"
		return map[string]*fnode{FuncCluster: {parts: parts, args: args, ops: float64(k)}}, dist
	}
	q := d * (d + 1) / 2
	l := make([]*fnode, k)
	for j := range k {
		z := make([]*fnode, d)
		for a := range d {
			s := binary(y[a], "-", num(fm.Centers[j*d+a]))
			if !fm.Diagonal {
				for b := range a {
					s = binary(s, "-", binary(num(fm.Chol[j*q+a*(a+1)/2+b]), "*", z[b]))
				}
			}
			z[a] = binary(s, "*", num(fm.InvDiag[j*d+a]))
		}
		l[j] = binary(num(fm.LogNorm[j]), "-", binary(num(0.5), "*", sumSquares(z)))
	}
	g := call("GREATEST", l...)
	var sum *fnode
	for j := range k {
		e := call("pg_catalog.exp", call("GREATEST", binary(l[j], "-", g), num(-708)))
		if sum == nil {
			sum = e
		} else {
			sum = binary(sum, "+", e)
		}
	}
	parts := []string{"CASE"}
	var args []*fnode
	for j := range k {
		parts[len(parts)-1] += "\n  WHEN "
		parts = append(parts, " >= "+float8Lit(expOneThreshold())+" THEN "+strconv.Itoa(fm.Numbers[j]))
		args = append(args, binary(l[j], "-", g))
	}
	parts[len(parts)-1] += "\nEND"
	return map[string]*fnode{
		FuncCluster:     {parts: parts, args: args, ops: float64(k)},
		FuncProbability: binary(num(1), "/", sum),
		FuncLogDensity:  binary(g, "+", call("pg_catalog.ln", sum)),
	}, l
}

// An fnode is one value of a scoring function's arithmetic: a leaf (a
// parameter $i or a literal) or an operation whose SQL text is
// parts[0] args[0] parts[1] … args[n−1] parts[n]. Nodes are shared where
// the Go scoring reuses a value, so the graph can be written either as one
// expression, repeating shared nodes, or as a chain that computes each once.
type fnode struct {
	parts []string
	args  []*fnode
	ops   float64 // operations this node evaluates itself (for the costs)
}

func param(i int) *fnode   { return &fnode{parts: []string{"$" + strconv.Itoa(i)}} }
func num(v float64) *fnode { return &fnode{parts: []string{float8Lit(v)}} }

// binary is (a op b): one IEEE operation, parenthesised so that the text
// fixes the order of evaluation.
func binary(a *fnode, op string, b *fnode) *fnode {
	return &fnode{parts: []string{"(", " " + op + " ", ")"}, args: []*fnode{a, b}, ops: 1}
}

// call is name(args...), costed as one operation per argument.
func call(name string, args ...*fnode) *fnode {
	parts := []string{name + "("}
	for range args[1:] {
		parts = append(parts, ", ")
	}
	return &fnode{parts: append(parts, ")"), args: args, ops: float64(len(args))}
}

// Forms of a function body (see FunctionsDDL and FunctionModel.Form).
const (
	formInline = "inline" // one expression, inlined by the planner
	formSplit  = "split"  // per-component scores inline, the rest in a helper
	formChain  = "chain"  // shared values computed once, in subqueries
)

// Costs of a call, in units of one float8 operation evaluated inline
// (about 5 ns on the machine measured; see BenchmarkScoringFunctions in
// cmd/assort). A body that is not inlined is prepared again on every call
// (PostgreSQL 15 re-initialises the plan, and checks EXECUTE permission
// and looks up the function of every operation as it does): a base, a
// share per subquery level, and about 24 units per operation.
const (
	chainBase     = 500
	chainPerLevel = 200
	chainPerOp    = 24
	// maxInlineOps caps what is written inline (about 20 bytes of SQL
	// per operation), whatever the costs say.
	maxInlineOps = 5000
	// bindMin is the smallest shared node a chain computes once; smaller
	// ones (a scaled feature, a difference) are cheaper repeated than
	// carried as a column.
	bindMin = 6
)

// body is the text of one function and how it must be declared.
type body struct {
	text   string
	strict bool    // not inlinable: STRICT, with a COST
	cost   float64 // per call, in the units above
}

func (b body) attrs() string {
	if !b.strict {
		return ""
	}
	return fmt.Sprintf(" STRICT COST %d", int64(math.Ceil(b.cost)))
}

// plan is how one output is written: its body and, in the split form, the
// body of its helper, which takes the k per-component scores.
type plan struct {
	form   string
	main   body
	helper *body
}

// planFunction writes root, a function of d parameters whose per-component
// scores are scores, in the given form, or in the cheapest when form is
// "". helper names the split form's helper.
func planFunction(root *fnode, scores []*fnode, d int, helper pgx.Identifier, form string) plan {
	memo := map[*fnode]float64{}
	full := inlineOps(root, memo)
	guard := 3 * float64(d)
	var outer float64
	for _, s := range scores {
		outer += inlineOps(s, memo)
	}
	// The helper's graph: root with each score replaced by a parameter.
	repl := map[*fnode]*fnode{}
	for j, s := range scores {
		repl[s] = param(j + 1)
	}
	hroot := substitute(root, repl, map[*fnode]*fnode{})
	chain := writeChain(root, d, true)
	split := writeChain(hroot, len(scores), false)
	if form == "" {
		form = formChain
		best := chain.cost
		if c := outer + guard + split.cost; outer <= maxInlineOps && len(scores) <= MaxFunctionFeatures && c <= best {
			form, best = formSplit, c
		}
		if c := full + guard; full <= maxInlineOps && c <= best {
			form = formInline
		}
	}
	if (form == formInline && full > 50*maxInlineOps) || (form == formSplit && outer > 50*maxInlineOps) {
		panic(fmt.Sprintf("schema: scoring functions: the %s form of this model would write %.3g operations", form, max(full, outer)))
	}
	if form == formSplit && len(scores) > MaxFunctionFeatures {
		panic(fmt.Sprintf("schema: scoring functions: the split form's helper cannot take %d components", len(scores)))
	}
	guarded := func(expr string) string {
		return "SELECT CASE WHEN " + finiteGuard(d) + " THEN\n" + expr + "\nEND"
	}
	switch form {
	case formInline:
		return plan{form: form, main: body{text: guarded(writeInline(root)), cost: full + guard}}
	case formSplit:
		args := make([]string, len(scores))
		for j, s := range scores {
			args[j] = writeInline(s)
		}
		text := guarded(helper.Sanitize() + "(\n" + strings.Join(args, ",\n") + ")")
		return plan{form: form, main: body{text: text, cost: outer + guard + split.cost}, helper: &split}
	case formChain:
		return plan{form: form, main: chain}
	}
	panic(fmt.Sprintf("schema: scoring functions: unknown form %q (want inline, split or chain)", form))
}

// inlineOps counts the operations of n written out in full, shared nodes
// repeated, remembering every node's count in memo.
func inlineOps(n *fnode, memo map[*fnode]float64) float64 {
	if v, ok := memo[n]; ok {
		return v
	}
	v := n.ops
	for _, a := range n.args {
		v += inlineOps(a, memo)
	}
	memo[n] = v
	return v
}

// substitute copies the graph under n with the nodes of repl replaced.
func substitute(n *fnode, repl, memo map[*fnode]*fnode) *fnode {
	if r, ok := repl[n]; ok {
		return r
	}
	if m, ok := memo[n]; ok {
		return m
	}
	c := &fnode{parts: n.parts, ops: n.ops}
	for _, a := range n.args {
		c.args = append(c.args, substitute(a, repl, memo))
	}
	memo[n] = c
	return c
}

// finiteGuard is true for a row of finite features: x − x is 0 for a
// finite x, NaN for ±Inf and NaN, and NULL for NULL.
func finiteGuard(d int) string {
	c := make([]string, d)
	for i := range c {
		c[i] = fmt.Sprintf("($%d - $%d) = 0::float8", i+1, i+1)
	}
	return strings.Join(c, " AND ")
}

// writeInline writes n as one expression, repeating shared nodes.
func writeInline(n *fnode) string {
	var b strings.Builder
	writeNode(&b, n, nil, true)
	return b.String()
}

// writeNode writes n, or its column name when it is bound and not top.
func writeNode(b *strings.Builder, n *fnode, cols map[*fnode]string, top bool) {
	if c, ok := cols[n]; ok && !top {
		b.WriteString(c)
		return
	}
	b.WriteString(n.parts[0])
	for i, a := range n.args {
		writeNode(b, a, cols, false)
		b.WriteString(n.parts[i+1])
	}
}

// writeChain writes root, a function of d parameters, as nested
// subqueries, innermost first: level 1 computes the shared nodes that
// depend on parameters only, level ℓ those that read level ℓ−1, and each
// level passes on the columns later levels still read. OFFSET 0 keeps the
// planner from flattening a level into its reader, which would repeat the
// shared nodes again. With guard, the innermost level keeps only rows of
// finite features (then none: the function returns NULL).
//
// A node is computed once (bound to a column) when the body as written so
// far would repeat it and repeating it costs bindMin operations or more;
// nodes are decided from the root down, so that a node inside a bound one
// counts once, not once per use of its reader.
func writeChain(root *fnode, d int, guard bool) body {
	var order []*fnode // arguments before their readers
	seen := map[*fnode]bool{}
	var visit func(n *fnode)
	visit = func(n *fnode) {
		if !seen[n] {
			seen[n] = true
			for _, a := range n.args {
				visit(a)
			}
			order = append(order, n)
		}
	}
	visit(root)
	uses := map[*fnode]float64{root: 1}
	name := map[*fnode]string{} // bound nodes
	memo := map[*fnode]float64{}
	for i := len(order) - 1; i >= 0; i-- {
		n := order[i]
		u := uses[n]
		if n != root && len(n.args) > 0 && u > 1 && inlineOps(n, memo) >= bindMin {
			name[n] = ""
		}
		if _, bound := name[n]; bound || n == root {
			u = 1
		}
		for _, a := range n.args {
			uses[a] += u
		}
	}
	// own returns the operations n evaluates itself, through unbound
	// arguments, and the bound nodes it reads.
	own := func(n *fnode) (float64, map[*fnode]bool) {
		reads := map[*fnode]bool{}
		var f func(m *fnode) float64
		f = func(m *fnode) float64 {
			v := m.ops
			for _, a := range m.args {
				if _, bound := name[a]; bound {
					reads[a] = true
				} else {
					v += f(a)
				}
			}
			return v
		}
		return f(n), reads
	}
	var cols []*fnode // bound nodes, arguments first
	level := map[*fnode]int{}
	last := map[*fnode]int{} // the highest level that reads a column
	var ops float64
	top := 0
	for _, n := range order {
		if _, bound := name[n]; !bound {
			continue
		}
		o, reads := own(n)
		ops += o
		for c := range reads {
			level[n] = max(level[n], level[c])
		}
		level[n]++
		for c := range reads {
			last[c] = max(last[c], level[n])
		}
		top = max(top, level[n])
		name[n] = "v" + strconv.Itoa(len(cols)+1)
		cols = append(cols, n)
	}
	o, reads := own(root)
	ops += o
	for c := range reads {
		last[c] = top + 1
	}
	passed := 0
	for _, c := range cols {
		passed += last[c] - level[c] - 1
	}
	var b strings.Builder
	b.WriteString("SELECT ")
	writeNode(&b, root, name, true)
	if top == 0 {
		if guard {
			b.WriteString("\nWHERE " + finiteGuard(d))
		}
	} else {
		b.WriteString("\nFROM ")
		writeLevel(&b, top, cols, level, last, name, d, guard)
		b.WriteString(" AS q" + strconv.Itoa(top))
	}
	if guard {
		ops += 3 * float64(d)
	}
	cost := chainBase + chainPerLevel*float64(top) + chainPerOp*ops + float64(passed)
	return body{text: b.String(), strict: true, cost: cost}
}

// writeLevel writes the subquery of level lv: the columns of lower levels
// that a higher one reads, then its own.
func writeLevel(b *strings.Builder, lv int, cols []*fnode, level, last map[*fnode]int, name map[*fnode]string, d int, guard bool) {
	var passed []string
	for _, c := range cols {
		if level[c] < lv && last[c] > lv {
			passed = append(passed, name[c])
		}
	}
	b.WriteString("(SELECT")
	if len(passed) > 0 {
		b.WriteString(" " + strings.Join(passed, ", "))
	}
	sep := len(passed) > 0
	for _, c := range cols {
		if level[c] == lv {
			if sep {
				b.WriteString(",")
			}
			sep = true
			b.WriteString("\n  ")
			writeNode(b, c, name, true)
			b.WriteString(" AS " + name[c])
		}
	}
	if lv > 1 {
		b.WriteString("\n  FROM ")
		writeLevel(b, lv-1, cols, level, last, name, d, guard)
		b.WriteString(" AS q" + strconv.Itoa(lv-1))
	} else if guard {
		b.WriteString("\n  WHERE " + finiteGuard(d))
	}
	b.WriteString(" OFFSET 0)")
}
