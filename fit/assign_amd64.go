//go:build amd64

package fit

import "math"

// vectorKernel says whether assignRows uses the AVX2 kernel
// (assignAVX2). It is set at start-up from the processor's features;
// tests clear it to compare the kernels.
var vectorKernel = hasAVX2()

// vectorMinRows is the fewest rows for which assignRows uses the vector
// kernel: below it, laying out the centres costs more than it saves.
const vectorMinRows = 8

// cpuid executes CPUID with EAX = eaxArg and ECX = ecxArg.
func cpuid(eaxArg, ecxArg uint32) (eax, ebx, ecx, edx uint32)

// xgetbv returns extended control register 0 (XCR0).
func xgetbv() (eax, edx uint32)

//go:noescape
func assignAVX2(label *int32, dist2 *float64, n int, rows *float64, d int, ct *float64, groups int)

//go:noescape
func nearestTwoAVX2(label *int32, dist2 *float64, second *float64, n int, rows *float64, d int, ct *float64, groups int)

// hasAVX2 reports whether the processor has AVX2 and the operating system
// saves the YMM registers (Intel 64 and IA-32 Architectures Software
// Developer's Manual, vol. 1, section 14.3, "Detection of Intel AVX
// instructions"; vol. 2, CPUID leaf 7, EBX bit 5 for AVX2).
func hasAVX2() bool {
	maxLeaf, _, _, _ := cpuid(0, 0)
	if maxLeaf < 7 {
		return false
	}
	_, _, ecx1, _ := cpuid(1, 0)
	const osxsave, avx = 1 << 27, 1 << 28
	if ecx1&osxsave == 0 || ecx1&avx == 0 {
		return false
	}
	if xcr0, _ := xgetbv(); xcr0&6 != 6 { // XMM and YMM state enabled
		return false
	}
	_, ebx7, _, _ := cpuid(7, 0)
	return ebx7&(1<<5) != 0
}

// assignRowsVector is assignRows by the AVX2 kernel, when the processor
// has AVX2 and there are at least vectorMinRows rows; it reports whether
// it did the work. The kernel measures four rows at once against four
// centres, one per vector lane, and keeps each distance's operation order
// (see assignAVX2), so labels and distances are bit for bit those of the
// pure-Go kernels; the last n mod 4 rows go to the pure-Go kernels.
func assignRowsVector(label []int32, dist2 []float64, centers []float64, d int, rows []float64) bool {
	n := len(dist2)
	if !vectorKernel || n < vectorMinRows {
		return false
	}
	if len(label) < n || len(rows) < n*d {
		panic("fit: assignRowsVector: short label or rows")
	}
	var stack [512]float64
	ct, groups := layoutGroups(stack[:], centers, d)
	m := n &^ 3 // the kernel takes rows four at a time
	assignAVX2(&label[0], &dist2[0], m, &rows[0], d, &ct[0], groups)
	if m < n {
		assignRowsScalar(label[m:n], dist2[m:n], centers, d, rows[m*d:n*d])
	}
	for i, v := range dist2[:m] {
		if math.Float64bits(v) == infBits {
			dist2[i], label[i] = settle(infBits, 0, rows[i*d:i*d+d], centers)
		}
	}
	return true
}

// nearestTwoRowsVector is nearestTwoRows by the AVX2 kernel
// (nearestTwoAVX2), under the same conditions as assignRowsVector; it
// reports whether it did the work.
func nearestTwoRowsVector(label []int32, best, second []float64, centers []float64, d int, rows []float64) bool {
	n := len(best)
	if !vectorKernel || n < vectorMinRows {
		return false
	}
	if len(label) < n || len(second) < n || len(rows) < n*d {
		panic("fit: nearestTwoRowsVector: short label, second or rows")
	}
	var stack [512]float64
	ct, groups := layoutGroups(stack[:], centers, d)
	m := n &^ 3
	nearestTwoAVX2(&label[0], &best[0], &second[0], m, &rows[0], d, &ct[0], groups)
	for i := m; i < n; i++ {
		label[i], best[i], second[i] = nearestTwo(centers, d, rows[i*d:i*d+d])
	}
	for i, v := range best[:m] {
		if math.Float64bits(v) == infBits {
			best[i], label[i] = settle(infBits, 0, rows[i*d:i*d+d], centers)
			second[i] = 0
		}
	}
	return true
}

// layoutGroups lays the K centres out for the kernels in groups of four,
// feature by feature: ct[(g·d + f)·4 + lane] = c_{4g+lane, f}, with NaN
// in the lanes past the last centre (never taken). It uses buf when the
// layout fits and returns the layout and the number of groups.
func layoutGroups(buf []float64, centers []float64, d int) ([]float64, int) {
	k := len(centers) / d
	groups := (k + 3) / 4
	ct := buf
	if m := groups * 4 * d; m <= len(buf) {
		ct = buf[:m]
	} else {
		ct = make([]float64, m)
	}
	nan := math.NaN()
	for g := range groups {
		for f := range d {
			lanes := ct[(g*d+f)*4 : (g*d+f)*4+4]
			for l := range lanes {
				if j := 4*g + l; j < k {
					lanes[l] = centers[j*d+f]
				} else {
					lanes[l] = nan
				}
			}
		}
	}
	return ct, groups
}
