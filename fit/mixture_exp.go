package fit

import "math"

// expTable holds 2^(j/32) for j = 0..31.
var expTable = func() (t [32]float64) {
	for j := range t {
		t[j] = math.Exp2(float64(j) / 32)
	}
	return t
}()

// Constants of expNonPos: ln 2 / 32 split into a head with trailing zero
// bits (so that k·head is exact for |k| < 2^20) and a tail.
const (
	expInvLn2x32   = 32 / math.Ln2
	expLn2Over32Hi = 0x1.62e42ffp-6  // ln2/32 rounded to 32 significant bits
	expRoundMagic  = 1.5 * (1 << 52) // adding and subtracting it rounds to an integer
)

const expLn2Over32Lo = math.Ln2/32 - expLn2Over32Hi

// expNonPos returns e^x for x ≤ 0 by table-driven range reduction (Tang
// 1989, ACM TOMS 15(2), 144–157): x = (32m + j) ln2/32 + r with
// |r| ≤ ln2/64, and
//
//	e^x = 2^m · 2^(j/32) · p(r),   p(r) = Σ_{i=0..6} r^i / i!,
//
// whose truncation error |r|^7/7! < 4e-18 is below half an ulp, so the
// result is within about 2 ulp of e^x. It has no branches on the common
// path and is several times faster than math.Exp in the responsibility
// loop. Arguments below −708 (where results leave the normal range),
// positive arguments and NaN go to math.Exp.
func expNonPos(x float64) float64 {
	if !(x >= -708 && x <= 0) {
		return math.Exp(x)
	}
	kf := (x*expInvLn2x32 + expRoundMagic) - expRoundMagic
	k := int64(kf)
	r := (x - kf*expLn2Over32Hi) - kf*expLn2Over32Lo
	p := 1 + r*(1+r*(1.0/2+r*(1.0/6+r*(1.0/24+r*(1.0/120+r*(1.0/720))))))
	v := expTable[k&31] * p
	return math.Float64frombits(math.Float64bits(v) + uint64(k>>5)<<52)
}

// expShifted sets dst[i] = e^(src[i] − shift[i]) as expNonPos does,
// except that arguments at or below cut give 0, and adds each value to
// sum[i]. cut must be at least −708. It is expNonPos written out in one
// loop so that the rows of a block pipeline.
func expShifted(dst, sum, src, shift []float64, cut float64) {
	if !(cut >= -708) {
		panic("fit: exp cut below -708")
	}
	src, shift, sum = src[:len(dst)], shift[:len(dst)], sum[:len(dst)]
	for i, v := range src {
		x := v - shift[i]
		var e float64
		if x > cut {
			if x <= 0 {
				kf := (x*expInvLn2x32 + expRoundMagic) - expRoundMagic
				k := int64(kf)
				r := (x - kf*expLn2Over32Hi) - kf*expLn2Over32Lo
				p := 1 + r*(1+r*(1.0/2+r*(1.0/6+r*(1.0/24+r*(1.0/120+r*(1.0/720))))))
				e = math.Float64frombits(math.Float64bits(expTable[k&31]*p) + uint64(k>>5)<<52)
			} else {
				e = math.Exp(x)
			}
		}
		dst[i] = e
		sum[i] += e
	}
}
