package pipeline

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/tracker"
)

// ar1Plant draws frames of p channels that are AR(1) in time with a known
// coefficient φ (x_t = φx_{t−1} + √(1−φ²)·u_t, unit variance) and
// correlated across channels through two shared factors in u_t.
type ar1Plant struct {
	rng *rand.Rand
	phi float64
	x   []float64
}

func (a *ar1Plant) frame() []float64 {
	f1, f2 := a.rng.NormFloat64(), a.rng.NormFloat64()
	s := math.Sqrt(1 - a.phi*a.phi)
	out := make([]float64, len(a.x))
	for i := range a.x {
		l1, l2 := 0.8, 0.0
		if i%2 == 1 {
			l1, l2 = 0.3, 0.7
		}
		u := l1*f1 + l2*f2 + math.Sqrt(1-l1*l1-l2*l2)*a.rng.NormFloat64()
		a.x[i] = a.phi*a.x[i] + s*u
		out[i] = 10 + 2*a.x[i]
	}
	return out
}

// ratiosOf scores frames with tr (no learning) and returns the T², SPE
// and φ ratios to their limits, as the engine records them.
func ratiosOf(t *testing.T, tr *tracker.Tracker, a *ar1Plant, start time.Time, period time.Duration, n int) ([]time.Time, [][nStatistics]float64) {
	t.Helper()
	ts := make([]time.Time, n)
	rs := make([][nStatistics]float64, n)
	var sc tracker.Score
	for k := 0; k < n; k++ {
		if err := tr.Evaluate(&sc, a.frame(), nil); err != nil {
			t.Fatal(err)
		}
		ts[k] = start.Add(time.Duration(k) * period)
		rs[k] = [nStatistics]float64{sc.T2 / sc.T2Limit, sc.SPE / sc.SPELimit, sc.Phi / sc.PhiLimit, math.NaN(), math.NaN(), math.NaN()}
	}
	return ts, rs
}

// fittedAR1 returns the six-channel AR(1) plant (φ = 0.95, one frame a
// minute, seeded), a tracker fitted on 5 days of it, the alarm rule of the
// budget tests (3 of 5, 10-minute off-delay) and the time of the first
// held-out frame. It skips a -short run (a long run).
func fittedAR1(t *testing.T) (*tracker.Tracker, *ar1Plant, alerts.AlarmRule, time.Time) {
	t.Helper()
	if testing.Short() {
		t.Skip("long run")
	}
	a := &ar1Plant{rng: rand.New(rand.NewPCG(11, 3)), phi: 0.95, x: make([]float64, 6)}
	for range 200 {
		a.frame()
	}
	tr, err := tracker.New(6, tracker.Config{Period: time.Minute})
	if err != nil {
		t.Fatal(err)
	}
	fit := make([][]float64, 5*24*60)
	for k := range fit {
		fit[k] = a.frame()
	}
	if err := tr.Fit(fit); err != nil {
		t.Fatal(err)
	}
	return tr, a, alerts.AlarmRule{N: 3, M: 5, OffDelay: 10 * time.Minute, Deadband: 0.05}, time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
}

// TestBudgetAR1: six channels, AR(1) with φ = 0.95 at one frame a minute,
// a model fitted on 5 days and the alarm rule 3 of 5 with a 10-minute
// off-delay. The per-frame α = 1 % limits, which assume independent
// frames, miss the budget (4.4 alerts a day in this run). Calibrated to a budget of one false
// alert a day on 10 held-out days, the rule's measured rate over a
// further 100 days lies within the calibration's 95 % interval and
// within a factor 2 of the budget (the target).
func TestBudgetAR1(t *testing.T) {
	tr, a, rule, t0 := fittedAR1(t)
	const period, day = time.Minute, 24 * 60
	ct, cr := ratiosOf(t, tr, a, t0, period, 10*day)
	const budget = 1.0
	cal, err := CalibrateBudget(ct, cr, budget, rule, 5)
	if err != nil {
		t.Fatal(err)
	}
	lt, lr := ratiosOf(t, tr, a, t0.Add(10*day*period), period, 100*day)
	got := float64(countAlerts(lt, lr, cal.Scale, rule)) / 100
	alpha := float64(countAlerts(lt, lr, 1, rule)) / 100
	t.Logf("scale %.3f, expected %.3f/day [%.3f, %.3f] from %d blocks of %v; measured %.2f/day over 100 days; per-frame α limits %.2f/day",
		cal.Scale, cal.Rate, cal.RateLow, cal.RateHigh, cal.Blocks, time.Duration(cal.Block), got, alpha)
	if got < cal.RateLow || got > cal.RateHigh {
		t.Errorf("measured %.2f false alerts/day outside the calibration's interval [%.3f, %.3f]", got, cal.RateLow, cal.RateHigh)
	}
	if got < budget/2 || got > 2*budget {
		t.Errorf("measured %.2f false alerts/day, budget %v: not within a factor 2", got, budget)
	}
	if alpha <= 2*budget || alpha <= cal.RateHigh {
		t.Errorf("per-frame α limits gave %.2f alerts/day; expected them to miss the budget (above 2× and above the interval)", alpha)
	}
}

// TestBudgetHeldOutFloor: held-out ratios whose excursions hover about
// their peak longer than the off-delay, so that each breaks into several
// alerts, while the block maxima count each once. The GEV's scale then
// opens more alerts over the held-out days than the budget allows there
// (⌊budget · days⌋); the calibration raises the scale to the smallest
// that does not (checked against a scan of the whole rule) and keeps the
// GEV's scale. Invented series (seeded), derived check.
func TestBudgetHeldOutFloor(t *testing.T) {
	const period = time.Minute
	const days = 4
	n := days * 24 * 60
	rng := rand.New(rand.NewPCG(5, 8))
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	ts := make([]time.Time, n)
	rs := make([][nStatistics]float64, n)
	for k := range rs {
		ts[k] = t0.Add(time.Duration(k) * period)
		rs[k] = [nStatistics]float64{0.3 + 0.1*rng.Float64(), math.NaN(), math.NaN(), math.NaN(), math.NaN(), math.NaN()}
	}
	// An excursion every 3 h: 90 min of peaks of one height, 8 min on and
	// 8 min off (longer than the 5 min off-delay), heights 0.9 to 1.5.
	for start := 60; start+90 < n; start += 180 {
		h := 0.9 + 0.6*rng.Float64()
		for k := start; k < start+90; k++ {
			if (k-start)%16 < 8 {
				rs[k][0] = h * (0.97 + 0.03*rng.Float64())
			}
		}
	}
	rule := alerts.AlarmRule{N: 3, M: 5, OffDelay: 5 * time.Minute}
	const budget = 0.5
	cal, err := CalibrateBudget(ts, rs, budget, rule, days)
	if err != nil {
		t.Fatal(err)
	}
	allow := int(math.Floor(budget * days))
	t.Logf("GEV scale %.4f, calibrated %.4f, held-out alerts %d (allowed %d), rate %.3f [%.3f, %.3f]",
		cal.GEVScale, cal.Scale, cal.Observed, allow, cal.Rate, cal.RateLow, cal.RateHigh)
	if !(cal.GEVScale > 0) {
		t.Fatalf("the GEV's scale was not raised (held-out alerts %d, allowed %d): the series does not exercise the floor", cal.Observed, allow)
	}
	if got := countAlerts(ts, rs, cal.GEVScale, rule); got <= allow {
		t.Errorf("at the GEV's scale %.4f the rule opens %d alerts, within the %d allowed: it should not have been raised", cal.GEVScale, got, allow)
	}
	if cal.Observed > allow || countAlerts(ts, rs, cal.Scale, rule) != cal.Observed {
		t.Errorf("calibrated scale %.4f opens %d alerts (recorded %d), allowed %d", cal.Scale, countAlerts(ts, rs, cal.Scale, rule), cal.Observed, allow)
	}
	// The smallest such scale: 0.2 % lower opens more than allowed.
	if got := countAlerts(ts, rs, cal.Scale*0.998, rule); got <= allow {
		t.Errorf("0.2 %% below the calibrated scale the rule opens %d alerts, still within %d: the scale is not the smallest", got, allow)
	}
	if !(cal.Rate < budget) {
		t.Errorf("rate at the raised scale %.3f, want below the budget %v", cal.Rate, budget)
	}
}
