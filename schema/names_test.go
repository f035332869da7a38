package schema

import (
	"regexp"
	"strings"
	"testing"
)

func TestValidateModelName(t *testing.T) {
	cases := []struct {
		name string
		err  string // substring; "" means valid
	}{
		{"galaxies", ""},
		{"g", ""},
		{"pop_2026", ""},
		{strings.Repeat("a", 40), ""},
		{strings.Repeat("a", 41), "1 to 40 characters"},
		{"", "1 to 40 characters"},
		{"Galaxies", "lower-case"},
		{"2pops", "starting with a letter"},
		{"_pops", "starting with a letter"},
		{"a b", "lower-case"},
		{`a"; DROP TABLE x; --`, "lower-case"},
		{"ünï", "lower-case"},
		{"models", "registry table"},
		{"components", "registry table"},
		{"publications", "registry table"},
		{"migrations", "registry table"},
		{"pops_v2", "version table"},
		{"pops_v2_memberships", "version table"},
		{"pops_memberships", "version table"},
		{"pops_v", ""},
		{"select", ""}, // reserved words are fine: names are always quoted
	}
	for _, c := range cases {
		err := ValidateModelName(c.name)
		switch {
		case c.err == "" && err != nil:
			t.Errorf("%q: unexpected error %v", c.name, err)
		case c.err != "" && (err == nil || !strings.Contains(err.Error(), c.err)):
			t.Errorf("%q: error %v, want one containing %q", c.name, err, c.err)
		}
	}
}

func TestParseRef(t *testing.T) {
	cases := []struct {
		ref     string
		name    string
		version int
		bad     bool
	}{
		{"pops", "pops", 0, false},
		{"pops@3", "pops", 3, false},
		{"pops@0", "", 0, true},
		{"pops@", "", 0, true},
		{"pops@x", "", 0, true},
		{"Pops@1", "", 0, true},
	}
	for _, c := range cases {
		name, v, err := ParseRef(c.ref)
		if (err != nil) != c.bad || name != c.name || v != c.version {
			t.Errorf("ParseRef(%q) = %q, %d, %v", c.ref, name, v, err)
		}
	}
}

// FuzzValidateModelName checks that every accepted name is safe to build
// relation names from: it matches the documented pattern, and the longest
// derived name fits PostgreSQL's 63-byte identifier limit.
func FuzzValidateModelName(f *testing.F) {
	for _, s := range []string{"galaxies", "models", "a_v1", "", "x\x00y", `"; drop`, "ä"} {
		f.Add(s)
	}
	pattern := regexp.MustCompile(`^[a-z][a-z0-9_]{0,39}$`)
	f.Fuzz(func(t *testing.T, name string) {
		if ValidateModelName(name) != nil {
			return
		}
		if !pattern.MatchString(name) {
			t.Fatalf("accepted %q", name)
		}
		v := Version{Schema: DefaultSchema, Model: name, N: 999999}
		if l := len(v.Memberships()[1]); l > 63 {
			t.Fatalf("derived name of %d bytes from %q", l, name)
		}
	})
}
