package limits_test

import (
	"fmt"

	"modewatch/tracker/limits"
)

// Limits of a model with l = 1 retained mode and three equal residual
// eigenvalues 0.3 (the equicorrelated p = 4, ρ = 0.7 model of Montgomery's
// exercise, whose residual roots are 1 − ρ = 0.3) at a 1 % false-alarm rate.
func Example() {
	th := limits.ThetaFromEigen([]float64{0.3, 0.3, 0.3})
	t2, _ := limits.T2ChiSquare(0.01, 1)
	spe, _ := limits.SPEBox(0.01, th)
	a, b := limits.PhiTraces(1, t2, spe, th, 0)
	phi, _ := limits.PhiLimit(0.01, a, b)
	fmt.Printf("T² %.6f  SPE %.6f  φ %.6f\n", t2, spe, phi)
	// Output: T² 6.634897  SPE 3.403460  φ 1.418749
}
