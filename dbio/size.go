package dbio

import (
	"fmt"
	"math/big"
	"strconv"
	"strings"
)

// MaxSize is the largest size ParseSize accepts: 1 EiB = 2⁶⁰ bytes.
const MaxSize int64 = 1 << 60

// sizeUnits maps a unit, in lower case, to its number of bytes. Binary
// prefixes are powers of 1024 and decimal prefixes powers of 1000, as IEC
// 80000-13 and the SI define them; "kb" and "KB" both mean the decimal
// kilobyte, since units are matched without regard to case.
var sizeUnits = map[string]int64{
	"":    1,
	"b":   1,
	"kib": 1 << 10,
	"mib": 1 << 20,
	"gib": 1 << 30,
	"tib": 1 << 40,
	"pib": 1 << 50,
	"eib": 1 << 60,
	"kb":  1e3,
	"mb":  1e6,
	"gb":  1e9,
	"tb":  1e12,
	"pb":  1e15,
	"eb":  1e18,
}

// maxSizeText is the longest text ParseSize reads: far more than any size
// needs, and short enough that the exact arithmetic costs nothing.
const maxSizeText = 64

// sizeWant ends every ParseSize error with what is accepted.
const sizeWant = `want a positive number of bytes with an optional unit such as ` +
	`KiB, MiB, GiB, TiB (powers of 1024) or kB, MB, GB, TB (powers of 1000), ` +
	`as in "512MiB" or "1.5GiB"`

// ParseSize parses a memory size: a decimal number, an optional space and
// an optional unit, as in "512MiB", "4GiB", "1.5GiB", "800MB", "64 KiB" or
// "100000000" (bytes). The units are B; KiB, MiB, GiB, TiB, PiB, EiB
// (powers of 1024); and kB, MB, GB, TB, PB, EB (powers of 1000), matched
// without regard to case. Space around the whole is ignored.
//
// The value is computed exactly and rounded down to whole bytes, so
// "1.5GiB" is 1610612736 and "0.1KiB" is 102. The result lies in
// [1, MaxSize]. An error quotes the input, says what is wrong (empty,
// negative, zero, less than one byte, not a number, a malformed number,
// an unknown unit, more than 1 EiB, longer than 64 bytes) and what is
// accepted.
func ParseSize(s string) (int64, error) {
	fail := func(what string) (int64, error) {
		return 0, fmt.Errorf("size %q: %s; %s", s, what, sizeWant)
	}
	if len(s) > maxSizeText {
		return 0, fmt.Errorf("size %q...: too long (%d bytes, at most %d); %s", s[:24], len(s), maxSizeText, sizeWant)
	}
	t := strings.TrimSpace(s)
	if t == "" {
		return fail("empty")
	}
	if t[0] == '-' {
		return fail("negative")
	}
	i := 0
	for i < len(t) && (t[i] >= '0' && t[i] <= '9' || t[i] == '.') {
		i++
	}
	num, unit := t[:i], strings.TrimLeft(t[i:], " \t")
	if num == "" {
		switch {
		case hasPrefixFold(t, "nan"):
			return fail("not a number")
		case hasPrefixFold(t, "inf"):
			return fail("infinite")
		}
		return fail("no number")
	}
	if strings.Count(num, ".") > 1 || num == "." {
		return fail(fmt.Sprintf("malformed number %q", num))
	}
	mult, ok := sizeUnits[strings.ToLower(unit)]
	if !ok {
		return fail(fmt.Sprintf("unknown unit %q", unit))
	}

	// value = mantissa · mult / 10^frac, exactly.
	whole, frac, _ := strings.Cut(num, ".")
	mantissa, ok := new(big.Int).SetString("0"+whole+frac, 10)
	if !ok {
		panic("dbio: ParseSize: digits did not parse: " + strconv.Quote(num))
	}
	scale := new(big.Int).Exp(big.NewInt(10), big.NewInt(int64(len(frac))), nil)
	bytes := new(big.Int).Mul(mantissa, big.NewInt(mult))
	limit := new(big.Int).Mul(big.NewInt(MaxSize), scale)
	switch {
	case bytes.Sign() == 0:
		return fail("zero")
	case bytes.Cmp(limit) > 0:
		return fail("more than 1 EiB")
	}
	bytes.Quo(bytes, scale)
	if bytes.Sign() == 0 {
		return fail("less than one byte")
	}
	return bytes.Int64(), nil
}

// hasPrefixFold reports whether s begins with prefix, ignoring case.
func hasPrefixFold(s, prefix string) bool {
	return len(s) >= len(prefix) && strings.EqualFold(s[:len(prefix)], prefix)
}

// binaryUnits are the units FormatSize uses; unit i is 1024^i bytes.
var binaryUnits = [...]string{"B", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"}

// FormatSize renders n bytes in the largest binary unit u for which
// |n| ≥ u, with three significant digits and no trailing zeros: "0 B",
// "1023 B", "1.5 KiB", "118 MiB", "1.5 GiB". Byte counts are shown whole,
// and a value that rounds to 1024 of a unit is shown as 1 of the next, so
// 1048575 is "1 MiB". ParseSize reads the result back to within half a
// unit in the third significant digit (a relative error below 0.5%).
func FormatSize(n int64) string {
	sign := ""
	m := uint64(n) // |n|, also for math.MinInt64
	if n < 0 {
		sign = "-"
		m = uint64(-n)
	}
	if m < 1024 {
		return sign + strconv.FormatUint(m, 10) + " B"
	}
	u := 0
	for u+1 < len(binaryUnits) && m>>(10*(u+1)) > 0 {
		u++
	}
	v := float64(m) / float64(uint64(1)<<(10*u))
	digits := 0 // decimals that leave three significant digits
	switch {
	case v < 10:
		digits = 2
	case v < 100:
		digits = 1
	}
	text := strconv.FormatFloat(v, 'f', digits, 64)
	if text == "1024" && u+1 < len(binaryUnits) {
		text, u = "1", u+1
	}
	if strings.Contains(text, ".") {
		text = strings.TrimRight(strings.TrimRight(text, "0"), ".")
	}
	return sign + text + " " + binaryUnits[u]
}
