package pipeline

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/tracker/limits"
)

// TestCreepUnboundedTail: held-out ratios whose creep block maxima look
// bounded (drawn below an end point, tail (1 − x)³: a free GEV fit gives
// ξ̂ < 0) beside per-frame statistics with exponential tails. The grouped
// calibration (smoothedOwn) fits creep's maxima with ξ ≥ 0, the Gumbel
// here, and its scale is that fit's level at the common tail level y,
// above the free fit's, which lies at the held-out maximum; the per-frame
// group keeps its free fit (invented series, seeded; derived check).
func TestCreepUnboundedTail(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	const nb, per = 40, 60
	block := time.Hour
	t0 := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	ts := make([]time.Time, nb*per)
	r := make([][nStatistics]float64, nb*per)
	for k := range r {
		ts[k] = t0.Add(time.Duration(k) * time.Minute)
		for j := range r[k] {
			r[k][j] = math.NaN()
		}
		for _, j := range []int{slotT2, slotSPE, slotPhi, slotResidual} {
			r[k][j] = 0.1 * rng.ExpFloat64()
		}
		r[k][slotCreep] = 0.9 * (1 - math.Pow(rng.Float64(), 1.0/3))
	}
	rule := alerts.AlarmRule{N: 3, M: 5, OffDelay: 5 * time.Minute, Deadband: 0.05}
	maxima := blockMaxima(ts, ruleStat(r, slotCreep, rule), block, nb)
	free, err := limits.FitGEV(maxima)
	if err != nil {
		t.Fatal(err)
	}
	if free.Xi >= 0 {
		t.Fatalf("free fit of creep's maxima: ξ̂ = %v, the test needs one below 0", free.Xi)
	}
	gum, err := limits.FitGumbel(maxima)
	if err != nil {
		t.Fatal(err)
	}
	sc, fits, _, y, ok := statScales(ts, r, rule, block, nb, 0.25/24, smoothedOwn)
	if !ok {
		t.Fatal("no per-group scales")
	}
	if f := fits[slotCreep]; f == nil || f.Xi != 0 {
		t.Fatalf("creep's fit %+v: want the Gumbel (ξ = 0)", f)
	}
	if want := gumbelLevel(gum.GEV, y); math.Abs(sc[slotCreep]-want) > 1e-9*want {
		t.Errorf("creep ×%.4f, the Gumbel fit's level at y = %.3f is %.4f", sc[slotCreep], y, want)
	}
	hi := math.Inf(-1)
	for _, m := range maxima {
		hi = math.Max(hi, m)
	}
	zf := gumbelLevel(free.GEV, y)
	t.Logf("creep ×%.4f (free fit's level %.4f, ξ̂ = %.3f), held-out maximum %.4f, y = %.3f", sc[slotCreep], zf, free.Xi, hi, y)
	if !(sc[slotCreep] > zf) || !(sc[slotCreep] > hi) {
		t.Errorf("creep ×%.4f: want it above the free fit's level %.4f and the held-out maximum %.4f", sc[slotCreep], zf, hi)
	}
	if f := fits[slotT2]; f == nil || f.Xi == 0 {
		t.Errorf("per-frame group's fit %+v: want the free fit", f)
	}
}
