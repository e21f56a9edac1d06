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

// paretoUnit returns two days of one-minute frames whose T² ratio is
// scale·U^(−ξ) (a Pareto tail: block maxima in the Fréchet domain with
// shape ξ, Coles 2001 §3.1.5) and the other statistics absent (NaN).
func paretoUnit(rng *rand.Rand, t0 time.Time, scale, xi float64) *ratioSeries {
	const n = 2 * 24 * 60
	s := &ratioSeries{t: make([]time.Time, n), r: make([][nStatistics]float64, n), spread: make([]bool, n)}
	for k := range n {
		s.t[k] = t0.Add(time.Duration(k) * time.Minute)
		for j := range nStatistics {
			s.r[k][j] = math.NaN()
		}
		s.r[k][slotT2] = scale * math.Pow(1-rng.Float64(), -xi)
	}
	return s
}

// TestPoolShape: the units calibrated together (alerts.calibration_shape:
// shared) get the common shape of limits.FitGEVCommonShape over their
// block maxima, each its own location and scale, and a scale from that
// fit; a unit with a smoothed statistic keeps its own fit; the
// likelihood-ratio statistic is stated; without PoolShape (own) each
// unit has its own shape. Invented, seeded ratio series.
func TestPoolShape(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 4))
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	rr := &RatioRecorder{units: map[string]*ratioSeries{
		"a": paretoUnit(rng, t0, 0.3, 0.2),
		"b": paretoUnit(rng, t0, 0.5, 0.2),
		"c": paretoUnit(rng, t0, 0.2, 0.2),
		"m": paretoUnit(rng, t0, 0.3, 0.2),
	}}
	for k := range rr.units["m"].r {
		rr.units["m"].r[k][slotMewma] = 0.5
	}
	rule := alerts.AlarmRule{N: 1, M: 1}
	const budget = 0.25
	own := map[string]Calibration{}
	for _, n := range []string{"a", "b", "c"} {
		cal, err := rr.Calibrate(n, budget, rule, 2, false, false, 0)
		if err != nil {
			t.Fatal(err)
		}
		if cal.SharedShape {
			t.Errorf("unit %s: shared shape before PoolShape", n)
		}
		own[n] = cal
	}
	no := func(string) bool { return false }
	var pu []PoolUnit
	for _, n := range []string{"a", "b", "c", "m"} {
		pu = append(pu, PoolUnit{Name: n, Budget: budget, Rule: rule})
	}
	sh, err := rr.PoolShape(pu, no, no)
	if err != nil {
		t.Fatal(err)
	}
	if len(sh.Units) != 3 || sh.Units[0] != "a" || sh.Units[2] != "c" {
		t.Fatalf("pooled units %v, want [a b c] (m has a smoothed statistic)", sh.Units)
	}
	// The same maxima, formed here: blocks of the length the unit's own
	// calibration states (the span from the first to the last frame cut
	// into heldOutBlocks).
	block, nb := time.Duration(own["a"].Block), own["a"].Blocks
	if nb != heldOutBlocks {
		t.Fatalf("%d blocks of %v, want %d over two days", nb, block, heldOutBlocks)
	}
	var xs [][]float64
	for _, n := range sh.Units {
		s := rr.units[n]
		m := make([]float64, nb)
		for k, v := range s.r {
			if b := int(s.t[k].Sub(t0) / block); b < nb {
				m[b] = math.Max(m[b], v[slotT2])
			}
		}
		xs = append(xs, m)
	}
	want, err := limits.FitGEVCommonShape(xs)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("common ξ %.3f (own %v), LR %.2f, p %.3f", sh.Xi, sh.Own, sh.LR, sh.P)
	if math.Abs(sh.Xi-want[0].Xi) > 1e-9 || !(sh.P > 0 && sh.P <= 1) || !(sh.LR >= 0) {
		t.Errorf("PoolShape ξ %v, LR %v, p %v; the common fit of the same maxima: ξ %v", sh.Xi, sh.LR, sh.P, want[0].Xi)
	}
	for i, n := range sh.Units {
		cal, err := rr.Calibrate(n, budget, rule, 2, false, false, 0)
		if err != nil {
			t.Fatal(err)
		}
		if !cal.SharedShape || cal.Xi != sh.Xi || math.Abs(cal.Mu-want[i].Mu) > 1e-9 || math.Abs(cal.Sigma-want[i].Sigma) > 1e-9 {
			t.Errorf("unit %s: shared %v, GEV (%v, %v, %v), want the common fit (%v, %v, %v)", n, cal.SharedShape, cal.Mu, cal.Sigma, cal.Xi, want[i].Mu, want[i].Sigma, want[i].Xi)
		}
		if own[n].Xi != sh.Own[i] {
			t.Errorf("unit %s: own ξ̂ %v stated, its own calibration had %v", n, sh.Own[i], own[n].Xi)
		}
		// The scale is the budget's return level of the unit's fit
		// (raised only if the held-out frames open too many alerts).
		p := budget * float64(cal.Block) / float64(24*time.Hour)
		if z := want[i].ReturnLevel(p); cal.GEVScale == 0 && math.Abs(cal.Scale-z) > 1e-9*z {
			t.Errorf("unit %s: scale %v, the common fit's return level %v", n, cal.Scale, z)
		}
	}
	if cal, err := rr.Calibrate("m", budget, rule, 2, false, false, 0); err != nil || cal.SharedShape {
		t.Errorf("unit with a smoothed statistic: shared %v, %v", cal.SharedShape, err)
	}
	// A unit whose ratio never moves (every block maximum equal) is left
	// out; the others are still pooled.
	flat := paretoUnit(rng, t0, 0.3, 0)
	rr.units["flat"] = flat
	sh, err = rr.PoolShape(append(pu, PoolUnit{Name: "flat", Budget: budget, Rule: rule}), no, no)
	if err != nil || len(sh.Units) != 3 {
		t.Errorf("with a flat unit: pooled %v, %v; want [a b c]", sh.Units, err)
	}
	// A unit calibrated per statistic is left out too.
	sh, err = rr.PoolShape(pu, func(n string) bool { return n == "b" }, no)
	if err != nil || len(sh.Units) != 2 {
		t.Errorf("per-statistic b: pooled %v, %v; want [a c]", sh.Units, err)
	}
	if _, ok := rr.shape["b"]; ok {
		t.Error("per-statistic b kept a shared fit")
	}
}
