package tracker

import "testing"

// The portable paths (gonum's blas64.Syrk instead of the AVX2/FMA kernel)
// give the same results: the covariance, batching and factorization tests
// rerun with the kernel switched off.
func TestWithoutAVX2Kernel(t *testing.T) {
	if !hasAVX2FMA {
		t.Skip("this CPU has no AVX2/FMA: the portable paths are what the other tests ran")
	}
	hasAVX2FMA = false
	defer func() { hasAVX2FMA = true }()
	t.Run("SyrkUpperMatchesGonum", TestSyrkUpperMatchesGonum)
	t.Run("EWBatchEqualsSingle", TestEWBatchEqualsSingle)
	t.Run("EWEqualsWeightedSum", TestEWEqualsWeightedSum)
	t.Run("EWBatchMissingEqualsDirect", TestEWBatchMissingEqualsDirect)
	t.Run("CholUpperMatchesGonum", TestCholUpperMatchesGonum)
	t.Run("MissingConditional", TestMissingConditional)
}
