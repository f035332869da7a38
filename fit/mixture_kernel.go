package fit

// Element-wise loops of the fused pass (eBlock), unrolled by four so that
// loop control does not dominate and independent elements overlap. The
// first slice sets the length; the others must be at least as long.

// shiftScale sets y[i] = (x[i] − mu) · s.
func shiftScale(y, x []float64, mu, s float64) {
	x = x[:len(y)]
	i := 0
	for ; i+4 <= len(y); i += 4 {
		y4, x4 := y[i:i+4:i+4], x[i:i+4:i+4]
		y4[0], y4[1], y4[2], y4[3] = (x4[0]-mu)*s, (x4[1]-mu)*s, (x4[2]-mu)*s, (x4[3]-mu)*s
	}
	for ; i < len(y); i++ {
		y[i] = (x[i] - mu) * s
	}
}

// addSquares sets acc[i] += y[i]².
func addSquares(acc, y []float64) {
	y = y[:len(acc)]
	i := 0
	for ; i+4 <= len(acc); i += 4 {
		a4, y4 := acc[i:i+4:i+4], y[i:i+4:i+4]
		a4[0], a4[1], a4[2], a4[3] = a4[0]+y4[0]*y4[0], a4[1]+y4[1]*y4[1], a4[2]+y4[2]*y4[2], a4[3]+y4[3]*y4[3]
	}
	for ; i < len(acc); i++ {
		acc[i] += y[i] * y[i]
	}
}

// mulTo sets w[i] = r[i] · y[i].
func mulTo(w, r, y []float64) {
	r, y = r[:len(w)], y[:len(w)]
	i := 0
	for ; i+4 <= len(w); i += 4 {
		w4, r4, y4 := w[i:i+4:i+4], r[i:i+4:i+4], y[i:i+4:i+4]
		w4[0], w4[1], w4[2], w4[3] = r4[0]*y4[0], r4[1]*y4[1], r4[2]*y4[2], r4[3]*y4[3]
	}
	for ; i < len(w); i++ {
		w[i] = r[i] * y[i]
	}
}
