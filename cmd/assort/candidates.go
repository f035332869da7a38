package main

import (
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	"assort/schema"
)

// sparkline draws values as a row of block characters, lowest to highest;
// missing values (NaN) are drawn as a space.
func sparkline(values []float64) string {
	const bars = "▁▂▃▄▅▆▇█"
	levels := []rune(bars)
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range values {
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			lo, hi = min(lo, v), max(hi, v)
		}
	}
	out := make([]rune, len(values))
	for i, v := range values {
		switch {
		case math.IsNaN(v) || math.IsInf(v, 0):
			out[i] = ' '
		case hi == lo:
			out[i] = levels[0]
		default:
			out[i] = levels[int(math.Round((v-lo)/(hi-lo)*float64(len(levels)-1)))]
		}
	}
	return string(out)
}

// criterionValue picks a criterion's value from a candidate row, NaN when
// it does not apply.
func criterionValue(c schema.Candidate, criterion string) float64 {
	if p := c.Criterion(criterion); p != nil {
		return *p
	}
	return math.NaN()
}

// writeCandidates prints the candidates of a version, the chosen one
// marked, with sparklines of the criterion and of the inertia (for an
// elbow reading).
func writeCandidates(w io.Writer, criterion string, cs []schema.Candidate) error {
	fmt.Fprintf(w, "\ncandidates (chosen by %s; * marks the chosen k):\n", criterion)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "\tk\tinertia\tlog-likelihood\tBIC\tAIC\tICL\tsilhouette\titerations\t")
	opt := func(p *float64) string {
		if p == nil {
			return "-"
		}
		return fmt.Sprintf("%.6g", *p)
	}
	for _, c := range cs {
		mark := ""
		if c.Chosen {
			mark = "*"
		}
		conv := ""
		if !c.Converged {
			conv = " (not converged)"
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\t%d%s\t\n", mark, c.K, opt(c.Inertia), opt(c.LogLikelihood),
			opt(c.BIC), opt(c.AIC), opt(c.ICL), opt(c.Silhouette), c.Iterations, conv)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if len(cs) < 2 {
		return nil
	}
	line := func(name string) {
		vals := make([]float64, len(cs))
		for i, c := range cs {
			vals[i] = criterionValue(c, name)
		}
		fmt.Fprintf(w, "  %-10s %s  (k = %d..%d, low to high)\n", name, sparkline(vals), cs[0].K, cs[len(cs)-1].K)
	}
	line(criterion)
	if criterion != "inertia" && cs[0].Inertia != nil {
		line("inertia")
	}
	return nil
}
