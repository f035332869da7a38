package fit

import (
	"fmt"
	"slices"
	"testing"
)

func TestParseKRange(t *testing.T) {
	tests := []struct {
		name string
		in   string
		want KRange
	}{
		{"single", "6", KRange{6}},
		{"one", "1", KRange{1}},
		{"range", "2:12", KRange{2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12}},
		{"range of one", "4:4", KRange{4}},
		{"list", "3,5,8", KRange{3, 5, 8}},
		{"list unsorted", "8,3,5", KRange{3, 5, 8}},
		{"list with duplicates", "5,3,5,3", KRange{3, 5}},
		{"list and range", "2:4,8", KRange{2, 3, 4, 8}},
		{"overlapping ranges", "6:9,2:7,12", KRange{2, 3, 4, 5, 6, 7, 8, 9, 12}},
		{"adjacent ranges", "1:2,3:4", KRange{1, 2, 3, 4}},
		{"spaces", " 3 , 5:6 ", KRange{3, 5, 6}},
		{"leading zero", "07", KRange{7}},
		{"largest k", "1000000", KRange{1000000}},
		{"most candidates", "1:10000", nil}, // checked by length below
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseKRange(tc.in)
			if err != nil {
				t.Fatalf("ParseKRange(%q): %v", tc.in, err)
			}
			if tc.want == nil {
				if len(got) != 10000 || got[0] != 1 || got[9999] != 10000 {
					t.Errorf("ParseKRange(%q) has %d values from %d", tc.in, len(got), got[0])
				}
				return
			}
			if !slices.Equal(got, tc.want) {
				t.Errorf("ParseKRange(%q) = %v, want %v", tc.in, got, tc.want)
			}
		})
	}
}

func TestParseKRangeErrors(t *testing.T) {
	tests := []struct {
		name, in, want string
	}{
		{"empty", "", `k "": empty; want a number ("6"), a range ("2:12") or a list ("3,5,8")`},
		{"blank", "  ", `k "  ": empty; want a number ("6"), a range ("2:12") or a list ("3,5,8")`},
		{"word", "abc", `k "abc": "abc" is not a whole number`},
		{"decimal", "2.5", `k "2.5": "2.5" is not a whole number`},
		{"plus sign", "+3", `k "+3": "+3" is not a whole number`},
		{"exponent", "1e3", `k "1e3": "1e3" is not a whole number`},
		{"zero", "0", `k "0": k must be at least 1, got 0`},
		{"negative", "-3", `k "-3": k must be at least 1, got -3`},
		{"bare minus", "-", `k "-": "-" is not a whole number`},
		{"range from zero", "0:3", `k "0:3": k must be at least 1, got 0`},
		{"range reversed", "5:2", `k "5:2": range 5:2 has its lower end above its upper end`},
		{"range no upper", "5:", `k "5:": range "5:" lacks an end; a range is lo:hi`},
		{"range no lower", ":5", `k ":5": range ":5" lacks an end; a range is lo:hi`},
		{"two colons", "2:4:6", `k "2:4:6": "2:4:6" has more than one colon; a range is lo:hi`},
		{"range bad end", "2:x", `k "2:x": "x" is not a whole number`},
		{"trailing comma", "3,5,", `k "3,5,": item 3 of 3 is empty (stray comma?)`},
		{"leading comma", ",3", `k ",3": item 1 of 2 is empty (stray comma?)`},
		{"double comma", "3,,5", `k "3,,5": item 2 of 3 is empty (stray comma?)`},
		{"zero in list", "3,0,5", `k "3,0,5": k must be at least 1, got 0`},
		{"k too large", "1000001", `k "1000001": k must be at most 1000000, got 1000001`},
		{"k huge", "99999999999999999999999", `k "99999999999999999999999": k must be at most 1000000, got 99999999999999999999999`},
		{"too many candidates", "1:10001", `k "1:10001": 10001 candidates; at most 10000 are allowed`},
		{"too many over a list", "1:6000,5001:12000", `k "1:6000,5001:12000": 12000 candidates; at most 10000 are allowed`},
		{"huge range", "1:1000000", `k "1:1000000": 1000000 candidates; at most 10000 are allowed`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseKRange(tc.in)
			if err == nil {
				t.Fatalf("ParseKRange(%q) = %v, want error %q", tc.in, got, tc.want)
			}
			if err.Error() != tc.want {
				t.Errorf("ParseKRange(%q) error\n got %s\nwant %s", tc.in, err, tc.want)
			}
			if got != nil {
				t.Errorf("ParseKRange(%q) returned %v with its error", tc.in, got)
			}
		})
	}
}

// FuzzParseKRange checks that ParseKRange never panics and that whatever it
// accepts is sorted, free of duplicates and within [1, maxK], with at most
// maxKCandidates values. Seed corpus: testdata/fuzz/FuzzParseKRange.
func FuzzParseKRange(f *testing.F) {
	for _, s := range []string{"6", "2:12", "3,5,8", "5:2", "0:3", "3,5,", "1:20000", "2:4,8", " 7 ", "-1", "1:1000000,999999:1000000"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		ks, err := ParseKRange(s)
		if err != nil {
			if ks != nil {
				t.Errorf("ParseKRange(%q) returned %v with error %v", s, ks, err)
			}
			return
		}
		if len(ks) == 0 || len(ks) > maxKCandidates {
			t.Fatalf("ParseKRange(%q) gave %d candidates", s, len(ks))
		}
		for i, k := range ks {
			if k < 1 || k > maxK {
				t.Fatalf("ParseKRange(%q)[%d] = %d outside [1, %d]", s, i, k, maxK)
			}
			if i > 0 && k <= ks[i-1] {
				t.Fatalf("ParseKRange(%q) = %v is not strictly increasing at %d", s, ks, i)
			}
		}
		// Parsing the canonical list form gives the same set.
		again, err := ParseKRange(joinK(ks))
		if err != nil || !slices.Equal(again, ks) {
			t.Fatalf("ParseKRange(%q) = %v, but its list form parses to %v, %v", s, ks, again, err)
		}
	})
}

// joinK writes ks as a comma-separated list.
func joinK(ks KRange) string {
	b := make([]byte, 0, 8*len(ks))
	for i, k := range ks {
		if i > 0 {
			b = append(b, ',')
		}
		b = fmt.Appendf(b, "%d", k)
	}
	return string(b)
}

func ExampleParseKRange() {
	ks, err := ParseKRange("8,2:4")
	fmt.Println(ks, err)
	_, err = ParseKRange("5:2")
	fmt.Println(err)
	// Output:
	// [2 3 4 8] <nil>
	// k "5:2": range 5:2 has its lower end above its upper end
}
