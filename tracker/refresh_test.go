package tracker

import (
	"errors"
	"math"
	"reflect"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// A Refresh that fails leaves the model whole: the channels in it, its
// correlation, its modes and every score. Channel 3 flat-lines while
// learning is frozen, so a Refresh would take it out of the model; the
// covariance is then spoiled so that the refresh fails (a non-finite entry,
// or a correlation from which the ℓ1 penalty keeps no mode).
func TestRefreshFailureKeepsModel(t *testing.T) {
	const p = 8
	corr := blockCorrelation(p, 4, 0.9) // two blocks of four channels moving together
	cov := func(tr *Tracker, f func(i, j int, v float64) float64) {
		tr.ew.Flush()
		c := tr.ew.cov.Data
		for i := 0; i < p; i++ {
			for j := 0; j < p; j++ {
				if i != j {
					c[i*p+j] = f(i, j, c[i*p+j])
				}
			}
		}
	}
	for _, tc := range []struct {
		name  string
		modes modes.Config
		spoil func(i, j int, v float64) float64
		want  error
	}{
		// A non-finite covariance entry: the mode solver refuses the matrix.
		{"non-finite", modes.Config{Count: 2}, func(int, int, float64) float64 { return math.NaN() }, modes.ErrNotFinite},
		// No correlation left: with the squared ℓ1 penalty γ = 2.5 (threshold
		// γ/2 = 1.25 > |(Ax)ᵢ| ≤ 1 for A = I) no mode keeps a loading, while
		// the block of four gives (Ax)ᵢ = (1 + 3·0.9)/2 = 1.85 per channel.
		{"no modes", modes.Config{Count: 1, Sparsity: []modes.Sparsity{{Method: modes.L1Pen, Gamma: 2.5}}},
			func(int, int, float64) float64 { return 0 }, ErrModel},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tr, err := New(p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 200, RefreshEvery: 1 << 20,
				FlatFrames: 20, Modes: tc.modes})
			if err != nil {
				t.Fatal(err)
			}
			src := newGaussSource(5, corr)
			sc, x := stepThrough(t, tr, src, p, 300)
			if tr.Modes().Count() == 0 {
				t.Fatal("no modes before the failed refresh")
			}
			tr.Freeze()
			for k := 0; k < 20; k++ {
				src.frame(x)
				x[3] = 7.5
				if err := tr.Step(&sc, x, nil); err != nil {
					t.Fatal(err)
				}
			}
			include := slices.Clone(tr.mdl.include)
			a := mat.DenseCopyOf(tr.mdl.a)
			var ids []int
			var load [][]float64
			for j := 0; j < tr.Modes().Count(); j++ {
				md := tr.Modes().Mode(j)
				ids = append(ids, md.ID)
				load = append(load, slices.Clone(md.Loadings))
			}
			missing := make([]bool, p)
			missing[5] = true
			var before, beforeMiss Score
			if err := tr.Evaluate(&before, x, nil); err != nil {
				t.Fatal(err)
			}
			if err := tr.Evaluate(&beforeMiss, x, missing); err != nil {
				t.Fatal(err)
			}

			cov(tr, tc.spoil)
			if err := tr.Refresh(); !errors.Is(err, ErrModel) || !errors.Is(err, tc.want) {
				t.Fatalf("Refresh: %v, want %v", err, tc.want)
			}

			if !slices.Equal(tr.mdl.include, include) {
				t.Errorf("channels in the model %v, before the failed refresh %v", tr.mdl.include, include)
			}
			if !mat.Equal(tr.mdl.a, a) {
				t.Error("the model's correlation changed")
			}
			if got := tr.Modes().Count(); got != len(ids) {
				t.Fatalf("%d modes, before the failed refresh %d", got, len(ids))
			}
			for j := range ids {
				md := tr.Modes().Mode(j)
				if md.ID != ids[j] || !slices.Equal(md.Loadings, load[j]) {
					t.Errorf("mode %d: id %d, loadings %v; before %d, %v", j, md.ID, md.Loadings, ids[j], load[j])
				}
			}
			var after, afterMiss Score
			if err := tr.Evaluate(&after, x, nil); err != nil {
				t.Fatal(err)
			}
			if err := tr.Evaluate(&afterMiss, x, missing); err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(after, before) {
				t.Errorf("score changed:\n%+v\nbefore\n%+v", after, before)
			}
			if !reflect.DeepEqual(afterMiss, beforeMiss) {
				t.Errorf("score with channel 5 missing changed:\n%+v\nbefore\n%+v", afterMiss, beforeMiss)
			}
		})
	}
}

// A Fit whose refresh fails leaves the tracker as it was: the learned
// statistics that standardize each frame, the model, and the flat-run
// counters of the stuck rule. The batch is independent channels, from which
// the squared ℓ1 penalty γ = 2.5 keeps no mode (see above), while the
// tracker learned two blocks of four channels correlated at 0.9.
func TestFitFailureKeepsTracker(t *testing.T) {
	const p = 8
	tr, err := New(p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 200, RefreshEvery: 1 << 20,
		FlatFrames: 20, Modes: modes.Config{Count: 1, Sparsity: []modes.Sparsity{{Method: modes.L1Pen, Gamma: 2.5}}}})
	if err != nil {
		t.Fatal(err)
	}
	src := newGaussSource(5, blockCorrelation(p, 4, 0.9))
	sc, x := stepThrough(t, tr, src, p, 300)
	for k := 0; k < 5; k++ { // channel 3 starts a flat run of 5 frames
		src.frame(x)
		x[3] = 7.5
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
	}
	if tr.Modes().Count() == 0 {
		t.Fatal("no modes before the failed fit")
	}
	run := slices.Clone(tr.run)
	var before Score
	if err := tr.Evaluate(&before, x, nil); err != nil {
		t.Fatal(err)
	}

	indep := newGaussSource(9, blockCorrelation(p, 1, 0))
	batch := make([][]float64, 400)
	for k := range batch {
		batch[k] = slices.Clone(indep.frame(make([]float64, p)))
	}
	if err := tr.Fit(batch); !errors.Is(err, ErrModel) {
		t.Fatalf("Fit: %v, want %v", err, ErrModel)
	}

	var after Score
	if err := tr.Evaluate(&after, x, nil); err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(after, before) {
		t.Errorf("score changed:\n%+v\nbefore\n%+v", after, before)
	}
	if !slices.Equal(tr.run, run) {
		t.Errorf("flat runs %v, before the failed fit %v", tr.run, run)
	}
}
