package modes

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

func sameInts(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}
