package modes_test

import (
	"encoding/csv"
	"fmt"
	"os"
	"strconv"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// pitprops reads the 13 × 13 Pitprops correlation matrix (Jeffers 1967;
// testdata/SOURCE.md) and its variable names.
func pitprops() (*mat.SymDense, []string) {
	f, err := os.Open("testdata/pitprops_corr.csv")
	if err != nil {
		panic(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		panic(err)
	}
	a := mat.NewSymDense(13, nil)
	for i := 0; i < 13; i++ {
		for j := i; j < 13; j++ {
			v, err := strconv.ParseFloat(rows[i+1][j+1], 64)
			if err != nil {
				panic(err)
			}
			a.SetSym(i, j, v)
		}
	}
	return a, rows[0][1:]
}

// The best five-variable mode of the Pitprops correlations: λ*(5) = 3.406155
// on topdiam, length, ringbut, bowdist, whorls (REFERENCE.md).
func ExampleSolve() {
	a, names := pitprops()
	sp, err := modes.ParseSparsity("l0:5")
	if err != nil {
		panic(err)
	}
	x := make([]float64, 13)
	res, err := modes.Solve(x, a, sp, nil, modes.NewWorkspace(13))
	if err != nil {
		panic(err)
	}
	fmt.Printf("variance %.4f (%.1f %% of 13), converged %v\n", res.Variance, 100*res.Variance/13, res.Converged)
	for i, v := range x {
		if v != 0 {
			fmt.Printf("%-8s %.3f\n", names[i], v)
		}
	}
	// Output:
	// variance 3.4062 (26.2 % of 13), converged true
	// topdiam  0.480
	// length   0.491
	// ringbut  0.405
	// bowdist  0.423
	// whorls   0.431
}

func ExampleParseSparsity() {
	for _, s := range []string{"l0:7", "l1sqrt:0.3", "logpen:0.3", "l1:0.5"} {
		sp, err := modes.ParseSparsity(s)
		if err != nil {
			fmt.Println(err)
			continue
		}
		fmt.Printf("%-10s -> %v %s\n", s, sp.Method, sp)
	}
	// Output:
	// l0:7       -> l0 l0:7
	// l1sqrt:0.3 -> l1sqrt l1sqrt:0.3
	// logpen:0.3 -> logpen logpen:0.3,0.1
	// modes: invalid sparsity "l1:0.5": S = 0.5: must be at least 1
}

// Three modes of the Pitprops correlations with 7, 4 and 4 variables (the
// first is the exact 7-sparse optimum, 30.74 % of the trace, REFERENCE.md). A
// second Refresh with the same matrix converges at once from the warm start
// and keeps the identities.
func ExampleSet() {
	a, names := pitprops()
	tr, err := modes.NewSet(13, modes.Config{
		Sparsity: []modes.Sparsity{{Method: modes.L0, K: 7}, {Method: modes.L0, K: 4}, {Method: modes.L0, K: 4}},
		Count:    3,
	})
	if err != nil {
		panic(err)
	}
	for refresh := 1; refresh <= 2; refresh++ {
		if err := tr.Refresh(a); err != nil {
			panic(err)
		}
		fmt.Printf("refresh %d\n", refresh)
		var cum float64
		for j := 0; j < tr.Count(); j++ {
			m := tr.Mode(j)
			cum += m.AdjustedVariance
			var sensors []string
			for _, i := range m.Support {
				sensors = append(sensors, names[i])
			}
			fmt.Printf("  mode %d: %.1f %% (cumulative %.1f %%), iterations %d, %v\n",
				m.ID, 100*m.AdjustedVariance/tr.TotalVariance(), 100*cum/tr.TotalVariance(), m.Iterations, sensors)
		}
	}
	// Output:
	// refresh 1
	//   mode 1: 30.7 % (cumulative 30.7 %), iterations 10, [topdiam length ringtop ringbut bowmax bowdist whorls]
	//   mode 2: 15.3 % (cumulative 46.0 %), iterations 13, [moist testsg whorls knots]
	//   mode 3: 12.5 % (cumulative 58.5 %), iterations 18, [ovensg ringtop ringbut diaknot]
	// refresh 2
	//   mode 1: 30.7 % (cumulative 30.7 %), iterations 0, [topdiam length ringtop ringbut bowmax bowdist whorls]
	//   mode 2: 15.3 % (cumulative 46.0 %), iterations 0, [moist testsg whorls knots]
	//   mode 3: 12.5 % (cumulative 58.5 %), iterations 0, [ovensg ringtop ringbut diaknot]
}
