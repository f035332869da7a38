package fit

import "math"

// sqDist returns ‖x − c‖² = Σ_j (x_j − c_j)², summed from j = 0 upward.
// c must have at least len(x) features.
func sqDist(x, c []float64) float64 {
	c = c[:len(x)]
	var s float64
	for j, v := range x {
		t := v - c[j]
		s += float64(t * t)
	}
	return s
}

var infBits = math.Float64bits(math.Inf(1))

// takeLess is one step of a running argmin: it returns (s, i) if s < best
// and (best, bi) otherwise, with best carried as raw bits so that the
// choice compiles to integer masking instead of a branch. Which centre is
// nearest is unpredictable, and a mispredicted branch per centre costs more
// than the distance itself when d is small. NaN is never taken.
func takeLess(best uint64, bi int, s float64, i int) (uint64, int) {
	var lt int
	if s < math.Float64frombits(best) {
		lt = 1 // SETcc, not a jump
	}
	m := -lt
	best ^= (best ^ math.Float64bits(s)) & uint64(m)
	bi ^= (bi ^ i) & m
	return best, bi
}

// settle handles a row whose every distance is +Inf or NaN: it reports
// centre 0 and the distance to it.
func settle(best uint64, bi int, x, centers []float64) (float64, int32) {
	if best == infBits {
		return sqDist(x, centers), 0
	}
	return math.Float64frombits(best), int32(bi)
}

// assignRows is the hot loop of every assignment: for each row it finds
// the nearest centre as Nearest defines it and stores label and squared
// distance. Shapes must already be checked and label and dist2 must have
// one element per row. Every kernel sums each distance in feature order
// with products rounded, and scans centres in index order keeping the first
// strict minimum, so all kernels give the same bits; they differ only in
// how much work they expose to the processor at once (measured by
// BenchmarkAssign): four centres per step in general, with the row held in
// registers for d = 2, 4 and 8 (each about 20% faster than the general
// loop), and on amd64 processors with AVX2 four centres per vector
// instruction (assignRowsVector) for batches of at least 8 rows.
func assignRows(label []int32, dist2 []float64, centers []float64, d int, rows []float64) {
	if assignRowsVector(label, dist2, centers, d, rows) {
		return
	}
	assignRowsScalar(label, dist2, centers, d, rows)
}

// assignRowsScalar is assignRows by the pure-Go kernels.
func assignRowsScalar(label []int32, dist2 []float64, centers []float64, d int, rows []float64) {
	switch d {
	case 2:
		assignRows2(label, dist2, centers, rows)
	case 4:
		assignRows4(label, dist2, centers, rows)
	case 8:
		assignRows8(label, dist2, centers, rows)
	default:
		assignRowsN(label, dist2, centers, d, rows)
	}
}

// assignRowsN measures four centres per step, each distance on its own
// accumulator, which gives the processor four independent chains.
func assignRowsN(label []int32, dist2 []float64, centers []float64, d int, rows []float64) {
	k := len(centers) / d
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[i*d : i*d+d]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+4 <= k; j += 4 {
			c0, c1, c2, c3 := c[:len(x)], c[d:d+len(x)], c[2*d:2*d+len(x)], c[3*d:3*d+len(x)]
			c = c[4*d:]
			var s0, s1, s2, s3 float64
			for f, v := range x {
				t0, t1, t2, t3 := v-c0[f], v-c1[f], v-c2[f], v-c3[f]
				s0 += float64(t0 * t0)
				s1 += float64(t1 * t1)
				s2 += float64(t2 * t2)
				s3 += float64(t3 * t3)
			}
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
			best, bi = takeLess(best, bi, s2, j+2)
			best, bi = takeLess(best, bi, s3, j+3)
		}
		for ; j < k; j++ {
			best, bi = takeLess(best, bi, sqDist(x, c), j)
			c = c[d:]
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// assignRows2 is assignRowsN for d = 2 with the row in registers.
func assignRows2(label []int32, dist2 []float64, centers []float64, rows []float64) {
	k := len(centers) / 2
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[2*i : 2*i+2 : 2*i+2]
		x0, x1 := x[0], x[1]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+4 <= k; j += 4 {
			cc := c[:8:8]
			c = c[8:]
			t0, t1, t2, t3 := x0-cc[0], x0-cc[2], x0-cc[4], x0-cc[6]
			s0, s1, s2, s3 := float64(t0*t0), float64(t1*t1), float64(t2*t2), float64(t3*t3)
			t0, t1, t2, t3 = x1-cc[1], x1-cc[3], x1-cc[5], x1-cc[7]
			s0, s1, s2, s3 = s0+float64(t0*t0), s1+float64(t1*t1), s2+float64(t2*t2), s3+float64(t3*t3)
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
			best, bi = takeLess(best, bi, s2, j+2)
			best, bi = takeLess(best, bi, s3, j+3)
		}
		for ; j < k; j++ {
			cc := c[:2:2]
			c = c[2:]
			t0, t1 := x0-cc[0], x1-cc[1]
			best, bi = takeLess(best, bi, float64(t0*t0)+float64(t1*t1), j)
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// assignRows4 is assignRowsN for d = 4 with the row in registers, two
// centres per step (four would run out of registers).
func assignRows4(label []int32, dist2 []float64, centers []float64, rows []float64) {
	k := len(centers) / 4
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[4*i : 4*i+4 : 4*i+4]
		x0, x1, x2, x3 := x[0], x[1], x[2], x[3]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+2 <= k; j += 2 {
			cc := c[:8:8]
			c = c[8:]
			t0, t1 := x0-cc[0], x0-cc[4]
			s0, s1 := float64(t0*t0), float64(t1*t1)
			t0, t1 = x1-cc[1], x1-cc[5]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x2-cc[2], x2-cc[6]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x3-cc[3], x3-cc[7]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
		}
		if j < k {
			best, bi = takeLess(best, bi, sqDist(x, c), j)
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// assignRows8 is assignRowsN for d = 8 with the row in registers, two
// centres per step.
func assignRows8(label []int32, dist2 []float64, centers []float64, rows []float64) {
	k := len(centers) / 8
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[8*i : 8*i+8 : 8*i+8]
		x0, x1, x2, x3, x4, x5, x6, x7 := x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+2 <= k; j += 2 {
			cc := c[:16:16]
			c = c[16:]
			t0, t1 := x0-cc[0], x0-cc[8]
			s0, s1 := float64(t0*t0), float64(t1*t1)
			t0, t1 = x1-cc[1], x1-cc[9]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x2-cc[2], x2-cc[10]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x3-cc[3], x3-cc[11]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x4-cc[4], x4-cc[12]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x5-cc[5], x5-cc[13]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x6-cc[6], x6-cc[14]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x7-cc[7], x7-cc[15]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
		}
		if j < k {
			best, bi = takeLess(best, bi, sqDist(x, c), j)
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// nearestTwo returns what assignRows gives the row x (the label of the
// first strict minimum of the squared distances and that distance; centre
// 0 and the distance to it when every distance is +Inf or NaN) and also
// second, the smallest squared distance from x to any other centre, NaN
// distances left out as the label's choice leaves them out: +Inf when
// K = 1, and 0 when no distance was finite, so that a bound built on it
// proves nothing. Each distance is summed as
// sqDist sums it, so label and best carry the same bits as assignRows's;
// like assignRows it holds the row in registers for d = 2, 4 and 8.
func nearestTwo(centers []float64, d int, x []float64) (label int32, best, second float64) {
	var bb, sb2 uint64
	var bi int
	switch d {
	case 2:
		bb, bi, sb2 = nearestTwo2(centers, x)
	case 4:
		bb, bi, sb2 = nearestTwo4(centers, x)
	case 8:
		bb, bi, sb2 = nearestTwo8(centers, x)
	default:
		bb, bi, sb2 = nearestTwoN(centers, d, x)
	}
	if bb == infBits {
		return 0, sqDist(x[:d], centers), 0
	}
	return int32(bi), math.Float64frombits(bb), math.Float64frombits(sb2)
}

// nearestTwoRows is nearestTwo for each row of rows (row-major, d
// features): label, best and second get one element per row. It uses the
// vector kernel where there is one.
func nearestTwoRows(label []int32, best, second []float64, centers []float64, d int, rows []float64) {
	if nearestTwoRowsVector(label, best, second, centers, d, rows) {
		return
	}
	for i := range best {
		label[i], best[i], second[i] = nearestTwo(centers, d, rows[i*d:i*d+d])
	}
}

// takeTwo is one step of a running argmin that also keeps the runner-up:
// best (as bits, bb) and bi as takeLess keeps them, and the runner-up's
// bits sb2 ← min(sb2, max(s, best)), which is the old best when s wins and
// s when it does not. Squared distances are never negative, and the bits
// of non-negative float64s (+Inf included) order as the numbers do, so
// the runner-up is tracked with integer min and max, which compile to
// conditional moves; a NaN's bits exceed +Inf's, so a NaN is never taken,
// as in takeLess.
func takeTwo(bb uint64, bi int, sb2 uint64, s float64, j int) (uint64, int, uint64) {
	sb2 = min(sb2, max(math.Float64bits(s), bb))
	bb, bi = takeLess(bb, bi, s, j)
	return bb, bi, sb2
}

func nearestTwoN(centers []float64, d int, x []float64) (uint64, int, uint64) {
	k := len(centers) / d
	x = x[:d]
	bb, bi, second := infBits, 0, infBits
	c := centers
	j := 0
	for ; j+4 <= k; j += 4 {
		c0, c1, c2, c3 := c[:len(x)], c[d:d+len(x)], c[2*d:2*d+len(x)], c[3*d:3*d+len(x)]
		c = c[4*d:]
		var s0, s1, s2, s3 float64
		for f, v := range x {
			t0, t1, t2, t3 := v-c0[f], v-c1[f], v-c2[f], v-c3[f]
			s0 += float64(t0 * t0)
			s1 += float64(t1 * t1)
			s2 += float64(t2 * t2)
			s3 += float64(t3 * t3)
		}
		bb, bi, second = takeTwo(bb, bi, second, s0, j)
		bb, bi, second = takeTwo(bb, bi, second, s1, j+1)
		bb, bi, second = takeTwo(bb, bi, second, s2, j+2)
		bb, bi, second = takeTwo(bb, bi, second, s3, j+3)
	}
	for ; j < k; j++ {
		bb, bi, second = takeTwo(bb, bi, second, sqDist(x, c), j)
		c = c[d:]
	}
	return bb, bi, second
}

func nearestTwo2(centers []float64, x []float64) (uint64, int, uint64) {
	k := len(centers) / 2
	x0, x1 := x[0], x[1]
	bb, bi, second := infBits, 0, infBits
	c := centers
	j := 0
	for ; j+2 <= k; j += 2 {
		cc := c[:4:4]
		c = c[4:]
		t0, t1 := x0-cc[0], x0-cc[2]
		s0, s1 := float64(t0*t0), float64(t1*t1)
		t0, t1 = x1-cc[1], x1-cc[3]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		bb, bi, second = takeTwo(bb, bi, second, s0, j)
		bb, bi, second = takeTwo(bb, bi, second, s1, j+1)
	}
	if j < k {
		bb, bi, second = takeTwo(bb, bi, second, sqDist(x[:2], c), j)
	}
	return bb, bi, second
}

func nearestTwo4(centers []float64, x []float64) (uint64, int, uint64) {
	k := len(centers) / 4
	x0, x1, x2, x3 := x[0], x[1], x[2], x[3]
	bb, bi, second := infBits, 0, infBits
	c := centers
	j := 0
	for ; j+2 <= k; j += 2 {
		cc := c[:8:8]
		c = c[8:]
		t0, t1 := x0-cc[0], x0-cc[4]
		s0, s1 := float64(t0*t0), float64(t1*t1)
		t0, t1 = x1-cc[1], x1-cc[5]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x2-cc[2], x2-cc[6]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x3-cc[3], x3-cc[7]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		bb, bi, second = takeTwo(bb, bi, second, s0, j)
		bb, bi, second = takeTwo(bb, bi, second, s1, j+1)
	}
	if j < k {
		bb, bi, second = takeTwo(bb, bi, second, sqDist(x[:4], c), j)
	}
	return bb, bi, second
}

func nearestTwo8(centers []float64, x []float64) (uint64, int, uint64) {
	k := len(centers) / 8
	x0, x1, x2, x3, x4, x5, x6, x7 := x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7]
	bb, bi, second := infBits, 0, infBits
	c := centers
	j := 0
	for ; j+2 <= k; j += 2 {
		cc := c[:16:16]
		c = c[16:]
		t0, t1 := x0-cc[0], x0-cc[8]
		s0, s1 := float64(t0*t0), float64(t1*t1)
		t0, t1 = x1-cc[1], x1-cc[9]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x2-cc[2], x2-cc[10]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x3-cc[3], x3-cc[11]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x4-cc[4], x4-cc[12]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x5-cc[5], x5-cc[13]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x6-cc[6], x6-cc[14]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		t0, t1 = x7-cc[7], x7-cc[15]
		s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
		bb, bi, second = takeTwo(bb, bi, second, s0, j)
		bb, bi, second = takeTwo(bb, bi, second, s1, j+1)
	}
	if j < k {
		bb, bi, second = takeTwo(bb, bi, second, sqDist(x[:8], c), j)
	}
	return bb, bi, second
}
