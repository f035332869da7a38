package dbio

import (
	"math"
	"strings"
	"testing"
)

// The units' values are definitions: binary prefixes are powers of 1024
// (IEC 80000-13) and decimal prefixes powers of 1000 (SI). The expected
// numbers below are worked out by hand from them.
func TestParseSize(t *testing.T) {
	tests := []struct {
		name string
		in   string
		want int64
	}{
		{"mebibytes", "512MiB", 512 << 20},
		{"gibibytes", "4GiB", 4 << 30},
		{"fraction of a gibibyte", "1.5GiB", 1610612736},
		{"megabytes", "800MB", 800_000_000},
		{"bare bytes", "100000000", 100_000_000},
		{"kibibytes", "64KiB", 65536},
		{"space before unit", "64 KiB", 65536},
		{"tab before unit", "64\tKiB", 65536},
		{"lower-case unit", "64kib", 65536},
		{"upper-case unit", "2GIB", 2 << 30},
		{"decimal kilobyte", "3kB", 3000},
		{"KB is decimal too", "3KB", 3000},
		{"gigabytes", "2GB", 2_000_000_000},
		{"tebibytes", "2TiB", 2 << 40},
		{"terabytes", "2TB", 2_000_000_000_000},
		{"byte unit", "17 B", 17},
		{"surrounding space", "  8MiB\n", 8 << 20},
		{"leading zeros", "007MiB", 7 << 20},
		{"leading point", ".5KiB", 512},
		{"trailing point", "2.KiB", 2048},
		{"rounded down to whole bytes", "0.1KiB", 102},
		{"one byte", "1", 1},
		{"long fraction rounded down", "1.0000000001GiB", 1 << 30},
		{"one and a bit bytes", "1.9", 1},
		{"exactly 1 EiB", "1EiB", 1 << 60},
		{"1 EiB in PiB", "1024PiB", 1 << 60},
		{"64 bytes of text", "1." + strings.Repeat("0", 58) + "1GiB", 1 << 30},
		{"1 EiB in bytes", "1152921504606846976", 1 << 60},
		{"decimal exabyte", "1EB", 1e18},
		{"fraction of a tebibyte", "0.25TiB", 1 << 38},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := ParseSize(tt.in)
			if err != nil {
				t.Fatalf("ParseSize(%q): %v", tt.in, err)
			}
			if got != tt.want {
				t.Fatalf("ParseSize(%q) = %d, want %d", tt.in, got, tt.want)
			}
		})
	}
}

func TestParseSizeErrors(t *testing.T) {
	const want = `; want a positive number of bytes with an optional unit such as ` +
		`KiB, MiB, GiB, TiB (powers of 1024) or kB, MB, GB, TB (powers of 1000), ` +
		`as in "512MiB" or "1.5GiB"`
	tests := []struct {
		name, in, msg string
	}{
		{"empty", "", `size "": empty`},
		{"blank", "  ", `size "  ": empty`},
		{"negative", "-1GiB", `size "-1GiB": negative`},
		{"negative zero", "-0", `size "-0": negative`},
		{"zero", "0", `size "0": zero`},
		{"zero with unit", "0.0 GiB", `size "0.0 GiB": zero`},
		{"below one byte", "0.5", `size "0.5": less than one byte`},
		{"below one byte with unit", "0.0001KiB", `size "0.0001KiB": less than one byte`},
		{"NaN", "NaN", `size "NaN": not a number`},
		{"nan with unit", "nan GiB", `size "nan GiB": not a number`},
		{"infinity", "Inf", `size "Inf": infinite`},
		{"unit alone", "GiB", `size "GiB": no number`},
		{"plus sign", "+5GiB", `size "+5GiB": no number`},
		{"two points", "1.5.2GiB", `size "1.5.2GiB": malformed number "1.5.2"`},
		{"point alone", ".GiB", `size ".GiB": malformed number "."`},
		{"unknown unit", "12 parsecs", `size "12 parsecs": unknown unit "parsecs"`},
		{"single-letter unit", "5G", `size "5G": unknown unit "G"`},
		{"exponent", "1e9", `size "1e9": unknown unit "e9"`},
		{"digit grouping", "1,000MB", `size "1,000MB": unknown unit ",000MB"`},
		{"just over 1 EiB", "1152921504606846977", `size "1152921504606846977": more than 1 EiB`},
		{"fraction over 1 EiB", "1.0000001EiB", `size "1.0000001EiB": more than 1 EiB`},
		{"2 EiB", "2EiB", `size "2EiB": more than 1 EiB`},
		{"too long", strings.Repeat("1", 65), `size "111111111111111111111111"...: too long (65 bytes, at most 64)`},
		{"beyond int64", "99999999999999999999999", `size "99999999999999999999999": more than 1 EiB`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := ParseSize(tt.in)
			if err == nil {
				t.Fatalf("ParseSize(%q) = %d, want an error", tt.in, got)
			}
			if err.Error() != tt.msg+want {
				t.Fatalf("ParseSize(%q) error\n got %q\nwant %q", tt.in, err, tt.msg+want)
			}
		})
	}
}

func TestFormatSize(t *testing.T) {
	tests := []struct {
		name string
		in   int64
		want string
	}{
		{"zero", 0, "0 B"},
		{"one byte", 1, "1 B"},
		{"most bytes", 1023, "1023 B"},
		{"one KiB", 1024, "1 KiB"},
		{"one and a half KiB", 1536, "1.5 KiB"},
		{"three digits below 10", 1034, "1.01 KiB"}, // 1.00977 KiB
		{"rounds up to 1 MiB", 1<<20 - 1, "1 MiB"},  // 1023.999 KiB
		{"1000 MiB stays in MiB", 1000 << 20, "1000 MiB"},
		{"two digits", 12345678, "11.8 MiB"},   // 11.7737 MiB
		{"three digits", 123456789, "118 MiB"}, // 117.737 MiB
		{"one and a half GiB", 1610612736, "1.5 GiB"},
		{"TiB", 5 << 40, "5 TiB"},
		{"PiB", 3 << 50, "3 PiB"},
		{"1 EiB", 1 << 60, "1 EiB"},
		{"largest int64", math.MaxInt64, "8 EiB"},
		{"negative", -1536, "-1.5 KiB"},
		{"smallest int64", math.MinInt64, "-8 EiB"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := FormatSize(tt.in); got != tt.want {
				t.Fatalf("FormatSize(%d) = %q, want %q", tt.in, got, tt.want)
			}
		})
	}
}

// FuzzParseSize checks that ParseSize never panics, that anything it
// accepts lies in [1, MaxSize], and that FormatSize renders it as a size
// ParseSize reads back to within the rounding of three significant digits
// (half a unit in the third digit: at most 0.5% of the value) plus the
// rounding down to whole bytes, and that renders as the same text again.
// The seed corpus is in testdata/fuzz/FuzzParseSize; run the fuzzer with
//
//	go test ./dbio/ -run '^$' -fuzz FuzzParseSize -fuzztime 1m
func FuzzParseSize(f *testing.F) {
	f.Fuzz(func(t *testing.T, s string) {
		n, err := ParseSize(s)
		if err != nil {
			if n != 0 {
				t.Fatalf("ParseSize(%q) = %d with error %v", s, n, err)
			}
			return
		}
		if n < 1 || n > MaxSize {
			t.Fatalf("ParseSize(%q) = %d, outside [1, %d]", s, n, MaxSize)
		}
		text := FormatSize(n)
		back, err := ParseSize(text)
		if err != nil {
			t.Fatalf("ParseSize(FormatSize(%d) = %q): %v", n, text, err)
		}
		if diff := math.Abs(float64(back) - float64(n)); diff > float64(n)/200+1 {
			t.Fatalf("ParseSize(FormatSize(%d) = %q) = %d, off by %g", n, text, back, diff)
		}
		if again := FormatSize(back); again != text {
			t.Fatalf("FormatSize(%d) = %q but FormatSize(%d) = %q", n, text, back, again)
		}
	})
}
