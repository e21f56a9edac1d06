package modes

// Sources of the check values in these tests: "REFERENCE.md" and
// "testdata/CONGRADU_NOTES.md §n" are testdata/REFERENCE.md (Pitprops λ*(k), eigenvalues,
// published multi-component results) and testdata/CONGRADU_NOTES.md (derivations
// and independent numpy check values for every ConGradU variant); the
// Pitprops matrix and its provenance are testdata/pitprops_corr.csv and
// testdata/SOURCE.md. gonum's mat.EigenSym and mat.Cholesky serve as the
// reference library.

import (
	"encoding/csv"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// pitpropsNames are the 13 variables of Jeffers (1967), in file order
// (testdata/SOURCE.md).
var pitpropsNames = []string{"topdiam", "length", "moist", "testsg", "ovensg", "ringtop",
	"ringbut", "bowmax", "bowdist", "whorls", "clear", "knots", "diaknot"}

// loadPitprops reads the 13 × 13 Pitprops correlation matrix (Jeffers 1967,
// testdata/pitprops_corr.csv; provenance in testdata/SOURCE.md).
func loadPitprops(tb testing.TB) *mat.SymDense {
	tb.Helper()
	f, err := os.Open("testdata/pitprops_corr.csv")
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		tb.Fatal(err)
	}
	if len(rows) != 14 {
		tb.Fatalf("pitprops: %d rows, want 14", len(rows))
	}
	a := mat.NewSymDense(13, nil)
	for i := 1; i < 14; i++ {
		if rows[i][0] != pitpropsNames[i-1] || rows[0][i] != pitpropsNames[i-1] {
			tb.Fatalf("pitprops: row/column %d is %q/%q, want %q", i, rows[i][0], rows[0][i], pitpropsNames[i-1])
		}
		for j := 1; j < 14; j++ {
			v, err := strconv.ParseFloat(rows[i][j], 64)
			if err != nil {
				tb.Fatalf("pitprops: row %d col %d: %v", i, j, err)
			}
			if j >= i {
				a.SetSym(i-1, j-1, v)
			} else if a.At(i-1, j-1) != v {
				tb.Fatalf("pitprops: not symmetric at %d,%d", i, j)
			}
		}
	}
	return a
}

// pitpropsIndex returns the indices of the named Pitprops variables, sorted.
func pitpropsIndex(tb testing.TB, names ...string) []int {
	tb.Helper()
	var idx []int
	for i, n := range pitpropsNames {
		for _, m := range names {
			if n == m {
				idx = append(idx, i)
			}
		}
	}
	if len(idx) != len(names) {
		tb.Fatalf("unknown pitprops name in %v", names)
	}
	return idx
}

// randomPSD returns a seeded random positive semidefinite p × p matrix
// BBᵀ/n with B p × n standard normal (a Wishart sample covariance).
func randomPSD(rng *rand.Rand, p, n int) *mat.SymDense {
	b := mat.NewDense(p, n, nil)
	for i := 0; i < p; i++ {
		for j := 0; j < n; j++ {
			b.Set(i, j, rng.NormFloat64())
		}
	}
	a := mat.NewSymDense(p, nil)
	a.SymOuterK(1/float64(n), b)
	return a
}

// leadingEigen returns the largest eigenvalue of a and its eigenvector
// (sign fixed: largest-magnitude entry positive), from gonum's EigenSym.
func leadingEigen(tb testing.TB, a *mat.SymDense) (float64, []float64) {
	tb.Helper()
	var es mat.EigenSym
	if !es.Factorize(a, true) {
		tb.Fatal("EigenSym failed")
	}
	vals := es.Values(nil)
	var vecs mat.Dense
	es.VectorsTo(&vecs)
	p := len(vals)
	v := make([]float64, p)
	for i := range v {
		v[i] = vecs.At(i, p-1)
	}
	best := 0
	for i := range v {
		if math.Abs(v[i]) > math.Abs(v[best]) {
			best = i
		}
	}
	if v[best] < 0 {
		for i := range v {
			v[i] = -v[i]
		}
	}
	return vals[p-1], v
}

func support(x []float64) []int {
	var s []int
	for i, v := range x {
		if v != 0 {
			s = append(s, i)
		}
	}
	return s
}

// spiked is a spiked sparse covariance model: r latent factors, factor f
// driving the k channels supports[f] with unit loadings v_f, plus unit
// white noise:
//
//	x = Σ_f √θ_f z_f v_f + e,  z_f, e_i ~ N(0, 1),  Cov x = I + Σ_f θ_f v_f v_fᵀ
//
// θ_f is the spike strength (signal-to-noise ratio of the factor: its
// variance along v_f over the noise variance 1).
type spiked struct {
	a        *mat.SymDense
	supports [][]int
	loadings [][]float64
}

// newSpiked draws the supports (disjoint, seeded) and loadings (random
// signs, magnitudes uniform in [0.5, 1], normalised). With n > 0, a is the
// sample covariance (1/n)Σxxᵀ of n draws (zero mean known); with n = 0 it is
// the population covariance.
func newSpiked(rng *rand.Rand, p, k int, theta []float64, n int) spiked {
	perm := rng.Perm(p)
	var m spiked
	for f := range theta {
		supp := append([]int(nil), perm[f*k:(f+1)*k]...)
		sortInts(supp)
		v := make([]float64, p)
		var s float64
		for _, i := range supp {
			v[i] = 0.5 + 0.5*rng.Float64()
			if rng.IntN(2) == 0 {
				v[i] = -v[i]
			}
			s += v[i] * v[i]
		}
		for _, i := range supp {
			v[i] /= math.Sqrt(s)
		}
		m.supports = append(m.supports, supp)
		m.loadings = append(m.loadings, v)
	}
	m.a = mat.NewSymDense(p, nil)
	if n == 0 {
		for i := 0; i < p; i++ {
			m.a.SetSym(i, i, 1)
		}
		for f, v := range m.loadings {
			m.a.SymRankOne(m.a, theta[f], mat.NewVecDense(p, v))
		}
		return m
	}
	x := make([]float64, p)
	xs := mat.NewVecDense(p, x)
	for s := 0; s < n; s++ {
		m.draw(rng, theta, x)
		m.a.SymRankOne(m.a, 1/float64(n), xs)
	}
	return m
}

// draw fills x with one draw of the model: unit noise plus each factor f,
// of variance theta[f], along its loadings.
func (m *spiked) draw(rng *rand.Rand, theta, x []float64) {
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	for f, v := range m.loadings {
		z := math.Sqrt(theta[f]) * rng.NormFloat64()
		for _, i := range m.supports[f] {
			x[i] += z * v[i]
		}
	}
}

// spikedCov returns the covariance of a spiked model with r factors of
// strength theta on k channels each (population if n = 0).
func spikedCov(rng *rand.Rand, p, r, k int, theta float64, n int) *mat.SymDense {
	th := make([]float64, r)
	for i := range th {
		th[i] = theta * float64(r-i)
	}
	return newSpiked(rng, p, k, th, n).a
}

func sortInts(s []int) {
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
}
