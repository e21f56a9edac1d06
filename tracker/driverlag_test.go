package tracker

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat"
)

// driverSeries writes n frames of five channels (invented data, seeded):
// a driver c, and own channels
//
//	y1 = c + 2 m + 0.2 e      driven (slope 1), under a slow cycle m of its own
//	y2 = m + 0.2 e            carries that cycle, not driven
//	y3 = w + 0.05 e           wanders slowly, not driven by anything
//	y4 = −1.5 c + 0.3 e       driven (slope −1.5)
//
// c, m, w first-order autoregressive with unit variance and lag-1
// autocorrelations 0.98, 0.995, 0.999; e independent standard normal. The
// frames are returned channel-major: x[ch][k], channels c, y1…y4.
func driverSeries(n int, seed uint64) [5][]float64 {
	rng := rand.New(rand.NewPCG(seed, 77))
	ar := func(v *float64, phi float64) float64 {
		*v = phi**v + math.Sqrt(1-phi*phi)*rng.NormFloat64()
		return *v
	}
	var x [5][]float64
	for i := range x {
		x[i] = make([]float64, n)
	}
	var c, m, w float64
	for k := range n {
		cv, mv, wv := ar(&c, 0.98), ar(&m, 0.995), ar(&w, 0.999)
		x[0][k] = cv
		x[1][k] = cv + 2*mv + 0.2*rng.NormFloat64()
		x[2][k] = mv + 0.2*rng.NormFloat64()
		x[3][k] = wv + 0.05*rng.NormFloat64()
		x[4][k] = -1.5*cv + 0.3*rng.NormFloat64()
	}
	return x
}

// learnDriverSeries steps a tracker with equal weights (no refresh after
// the first) through the frames x of driverSeries, with drivers (channel 0
// the context channel) observing them; it returns both and the last frame.
func learnDriverSeries(t *testing.T, x [5][]float64) (*Tracker, *Drivers, []float64) {
	t.Helper()
	tr, err := New(len(x), Config{Period: time.Second, WarmUp: 200, RefreshEvery: 1 << 30})
	if err != nil {
		t.Fatal(err)
	}
	d, err := NewDrivers(len(x), []bool{true, false, false, false, false})
	if err != nil {
		t.Fatal(err)
	}
	var sc Score
	f := make([]float64, len(x))
	for k := range x[0] {
		for i := range f {
			f[i] = x[i][k]
		}
		if err := tr.Step(&sc, f, nil); err != nil {
			t.Fatal(err)
		}
		d.Observe(f, nil, tr)
	}
	return tr, d, f
}

// TestDriverSlopeTest: the slope test keeps the slopes of truly driven
// channels and sets an undriven one's to 0. Each seeded run learns 20 000
// frames of driverSeries with equal weights and fits the drivers twice:
//
//   - without the test (SetLevel(0)) every slope equals the plain
//     least-squares slope of the channel on the driver (reference: gonum
//     stat.LinearRegression on the same frames; the tracker's ridge 1e-6
//     on the driver's unit variance bounds the difference);
//   - with the default test, the driven y1 and y4 keep exactly those
//     slopes, within a stated distance of the true 1 and −1.5; the
//     undriven y2, tied to y1 by their shared cycle and so in the
//     driver's component, keeps its (chance) slope: the test removes only
//     channels unrelated to every channel the driver moves; the
//     wandering y3 gets 0 in at least 9 of the 10 runs, where least
//     squares gives it a chance slope (its partial correlations with the
//     four others are tested at 1 %/4 each, so at most 1 % of runs keep
//     it).
//
// Tolerances by hand (Bartlett's variance of a slope between serially
// correlated series, Var ≈ σₑ²/(n σ_c²) · Σₖ ρ_c(k)ρₑ(k)): y1's residual
// 2m has Σρρ = (1 + 0.98·0.995)/(1 − 0.98·0.995) ≈ 79, so with n = 20 000
// its standard error is 2·√(79/20000) ≈ 0.13; 0.45 is 3.5 of them. y4's
// residual is white: 0.3/√20000 ≈ 0.002; 0.01 is 5 of them.
func TestDriverSlopeTest(t *testing.T) {
	const n, p = 20000, 5
	kept3 := 0
	for seed := uint64(1); seed <= 10; seed++ {
		x := driverSeries(n, seed)
		tr, d, _ := learnDriverSeries(t, x)
		var ols [p]float64
		for i := 1; i < p; i++ {
			_, ols[i] = stat.LinearRegression(x[0], x[i], nil, false)
		}
		d.SetLevel(0)
		if err := d.Fit(tr); err != nil {
			t.Fatal(err)
		}
		for i, s := range d.Slopes() {
			if !scalar.EqualWithinAbsOrRel(s, ols[i+1], 1e-9, 1e-5) {
				t.Errorf("seed %d: untested slope of y%d = %.6f, least squares (gonum) %.6f", seed, i+1, s, ols[i+1])
			}
		}
		d.SetLevel(DefaultDriverLevel)
		if err := d.Fit(tr); err != nil {
			t.Fatal(err)
		}
		s := d.Slopes()
		for _, i := range []int{1, 2, 4} {
			if !scalar.EqualWithinAbsOrRel(s[i-1], ols[i], 1e-9, 1e-5) {
				t.Errorf("seed %d: tested slope of y%d = %.6f, want it kept at least squares' %.6f", seed, i, s[i-1], ols[i])
			}
		}
		if math.Abs(s[0]-1) > 0.45 {
			t.Errorf("seed %d: y1's slope %.3f, true 1 (± 0.45)", seed, s[0])
		}
		if math.Abs(s[3]+1.5) > 0.01 {
			t.Errorf("seed %d: y4's slope %.4f, true −1.5 (± 0.01)", seed, s[3])
		}
		t.Logf("seed %d: slopes y1…y4 %.3f, least squares y3 %.3f", seed, s, ols[3])
		if s[2] != 0 {
			kept3++
		} else if ols[3] == 0 {
			t.Errorf("seed %d: least squares gives y3 no slope at all: the test shows nothing", seed)
		}
	}
	if kept3 > 1 {
		t.Errorf("the undriven y3 kept its chance slope in %d of 10 runs, want at most 1", kept3)
	}
}

// TestDriverLagsRoundTrip: the slope test's statistics saved by Lags and
// restored by SetLags into new drivers give the same regression at the
// next Fit, Observe and Fit allocate nothing, and a state of the wrong
// length is refused.
func TestDriverLagsRoundTrip(t *testing.T) {
	const n, p = 3000, 5
	x := driverSeries(n, 3)
	tr, a, f := learnDriverSeries(t, x)
	b, _ := NewDrivers(p, []bool{true, false, false, false, false})
	if err := b.SetLags(a.Lags()); err != nil {
		t.Fatal(err)
	}
	if err := b.SetLags(a.Lags()[1:]); err == nil {
		t.Error("SetLags took a state one value short")
	}
	// States no run reaches are refused and leave b as it was: the count,
	// phase and Fit counter, a smoothed value, a covariance entry and a
	// keep flag.
	good := a.Lags()
	before := b.Lags()
	last := len(good) - 1
	cov := 3 + p // the first covariance entry
	for _, c := range []struct {
		at int
		v  float64
	}{{0, math.NaN()}, {0, -1}, {1, 8}, {1, math.Inf(1)}, {2, -2}, {3, math.Inf(-1)}, {cov, math.NaN()}, {last, 0.5}} {
		bad := slices.Clone(good)
		bad[c.at] = c.v
		if err := b.SetLags(bad); !errors.Is(err, ErrInput) {
			t.Errorf("SetLags with value %d = %v: %v, want %v", c.at, c.v, err, ErrInput)
		}
		if !slices.Equal(b.Lags(), before) {
			t.Errorf("a refused state (value %d = %v) changed the test's statistics", c.at, c.v)
		}
	}
	if err := a.Fit(tr); err != nil {
		t.Fatal(err)
	}
	if err := b.Fit(tr); err != nil {
		t.Fatal(err)
	}
	for i, s := range a.Slopes() {
		if b.Slopes()[i] != s {
			t.Errorf("slope %d after restore %v, before %v", i, b.Slopes()[i], s)
		}
	}
	if allocs := testing.AllocsPerRun(100, func() { a.Observe(f, nil, tr) }); allocs != 0 {
		t.Errorf("Observe allocates %v", allocs)
	}
	if allocs := testing.AllocsPerRun(20, func() { _ = a.Fit(tr) }); allocs != 0 {
		t.Errorf("Fit with the slope test allocates %v", allocs)
	}
}

// BenchmarkDriverFrame measures one frame of a unit with 2 context
// channels through Step alone and through Step, the drivers' Observe and
// Adjust and their Fit with the slope test at every refresh (64 frames),
// at p channels; the ratio of the two is the drivers' cost.
func BenchmarkDriverFrame(b *testing.B) {
	for _, p := range []int{50, 200} {
		for _, withDrivers := range []bool{false, true} {
			name := "p=" + strconv.Itoa(p) + "/step"
			if withDrivers {
				name += "+drivers"
			}
			b.Run(name, func(b *testing.B) {
				var sc Score
				tr, frames := newBenchTracker(b, &sc, p, 64, 64, 512)
				ctx := make([]bool, p)
				ctx[0], ctx[1] = true, true
				d, err := NewDrivers(p, ctx)
				if err != nil {
					b.Fatal(err)
				}
				adj := make([]float64, p)
				b.ReportAllocs()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					x := frames[i%len(frames)]
					if err := tr.Step(&sc, x, nil); err != nil {
						b.Fatal(err)
					}
					if withDrivers {
						d.Observe(x, nil, tr)
						if sc.NextRefresh == tr.cfg.RefreshEvery || !d.Ready() {
							_ = d.Fit(tr)
						}
						d.Adjust(adj, x, nil, tr)
					}
				}
			})
		}
	}
}
