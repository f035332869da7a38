//go:build !amd64

package fit

// vectorKernel is false where there is no vector kernel; assignRows then
// always runs the pure-Go kernels.
var vectorKernel = false

// assignRowsVector does nothing where there is no vector kernel.
func assignRowsVector(label []int32, dist2 []float64, centers []float64, d int, rows []float64) bool {
	return false
}

// nearestTwoRowsVector does nothing where there is no vector kernel.
func nearestTwoRowsVector(label []int32, best, second []float64, centers []float64, d int, rows []float64) bool {
	return false
}
