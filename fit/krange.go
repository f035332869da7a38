package fit

import (
	"fmt"
	"slices"
	"strings"
)

// KRange is a set of candidate cluster counts, sorted ascending with no
// duplicates, every one at least 1.
type KRange []int

// Limits on a KRange: no candidate above maxK and at most maxKCandidates
// candidates, so a typo cannot start a run that never ends.
const (
	maxK           = 1_000_000
	maxKCandidates = 10_000
)

// ParseKRange parses a --k value. The grammar is a comma-separated list of
// items, each a whole number ("6") or an inclusive range lo:hi ("2:12");
// spaces around items are ignored. So "6", "2:12", "3,5,8" and "2:4,8" are
// all valid. The result is sorted ascending and duplicates are dropped.
//
// Errors quote the input and say what is wrong: an empty value or item
// (such as a trailing comma), something that is not a whole number, k < 1,
// a range whose lower end is above its upper end, k above maxK, or more
// than maxKCandidates candidates in all.
func ParseKRange(s string) (KRange, error) {
	if strings.TrimSpace(s) == "" {
		return nil, fmt.Errorf(`k %q: empty; want a number ("6"), a range ("2:12") or a list ("3,5,8")`, s)
	}
	type span struct{ lo, hi int }
	items := strings.Split(s, ",")
	spans := make([]span, 0, len(items))
	for n, item := range items {
		item = strings.TrimSpace(item)
		if item == "" {
			return nil, fmt.Errorf("k %q: item %d of %d is empty (stray comma?)", s, n+1, len(items))
		}
		lo, hi, isRange := strings.Cut(item, ":")
		if strings.Contains(hi, ":") {
			return nil, fmt.Errorf("k %q: %q has more than one colon; a range is lo:hi", s, item)
		}
		if isRange && (strings.TrimSpace(lo) == "" || strings.TrimSpace(hi) == "") {
			return nil, fmt.Errorf("k %q: range %q lacks an end; a range is lo:hi", s, item)
		}
		a, err := parseK(lo)
		if err != nil {
			return nil, fmt.Errorf("k %q: %w", s, err)
		}
		b := a
		if isRange {
			if b, err = parseK(hi); err != nil {
				return nil, fmt.Errorf("k %q: %w", s, err)
			}
			if a > b {
				return nil, fmt.Errorf("k %q: range %d:%d has its lower end above its upper end", s, a, b)
			}
		}
		spans = append(spans, span{a, b})
	}
	// Merge overlapping spans to count distinct candidates before
	// materialising any of them.
	slices.SortFunc(spans, func(x, y span) int { return x.lo - y.lo })
	merged := spans[:1]
	for _, sp := range spans[1:] {
		last := &merged[len(merged)-1]
		if sp.lo <= last.hi+1 {
			last.hi = max(last.hi, sp.hi)
		} else {
			merged = append(merged, sp)
		}
	}
	count := 0
	for _, sp := range merged {
		count += sp.hi - sp.lo + 1
	}
	if count > maxKCandidates {
		return nil, fmt.Errorf("k %q: %d candidates; at most %d are allowed", s, count, maxKCandidates)
	}
	ks := make(KRange, 0, count)
	for _, sp := range merged {
		for k := sp.lo; k <= sp.hi; k++ {
			ks = append(ks, k)
		}
	}
	return ks, nil
}

// parseK parses one whole number in [1, maxK]: ASCII digits with an
// optional leading minus sign (accepted only to report k < 1 plainly). The
// caller has checked that s is not blank.
func parseK(s string) (int, error) {
	t := strings.TrimSpace(s)
	digits := strings.TrimPrefix(t, "-")
	if digits == "" {
		return 0, fmt.Errorf("%q is not a whole number", t)
	}
	v := 0
	for i := 0; i < len(digits); i++ {
		c := digits[i]
		if c < '0' || c > '9' {
			return 0, fmt.Errorf("%q is not a whole number", t)
		}
		if v <= maxK { // stop growing once too large; keeps v from overflowing
			v = v*10 + int(c-'0')
		}
	}
	if digits != t || v < 1 {
		return 0, fmt.Errorf("k must be at least 1, got %s", t)
	}
	if v > maxK {
		return 0, fmt.Errorf("k must be at most %d, got %s", maxK, t)
	}
	return v, nil
}
