package pipeline

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
	"modewatch/tracker/limits"
	"modewatch/tracker/modes"
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
// (fewer than budget · days); the calibration raises the scale to the smallest
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
	allow := int(heldOutAllowance(budget, cal.HeldOutDays))
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
	// After a raise the scale is the level of the (Observed+1)-th held-out
	// excursion, and the stated rate the Gamma(Observed+1) pivot's mean
	// (stateRate), not the GEV's rate there.
	if want := float64(cal.Observed+1) / cal.HeldOutDays; !scalar.EqualWithinAbsOrRel(cal.Rate, want, 1e-12, 1e-12) || !(cal.GEVRate < cal.Rate) {
		t.Errorf("rate at the raised scale %.3f (GEV's %.3f), want the pivot's %.3f above the GEV's", cal.Rate, cal.GEVRate, want)
	}
}

// blipPlant draws, per 5 s frame, the ratios statistic/limit of two alarm
// statistics of one unit, as the engine records them:
//
//   - slot 0 (T²) is quiet (0.3·χ²₂/2) but for blips: with probability
//     blipRate per frame a run of blipLen frames at 4 to 8 times the limit, what
//     a quantised, nearly constant channel stepping by one quantum for a
//     few frames gives (the realism suite's seal-gas pressure);
//   - slot 1 (SPE) is AR(1) in time (φ = 0.95), 0.5 + 0.2·x, x of unit
//     variance, plus drift(k) from the caller.
type blipPlant struct {
	rng      *rand.Rand
	x        float64
	blipRate float64
	blipLen  int
	left     int
	height   float64
}

func (b *blipPlant) series(start time.Time, n int, drift func(k int) float64) ([]time.Time, [][nStatistics]float64) {
	const period = 5 * time.Second
	ts := make([]time.Time, n)
	rs := make([][nStatistics]float64, n)
	for k := range n {
		ts[k] = start.Add(time.Duration(k) * period)
		for j := range rs[k] {
			rs[k][j] = math.NaN()
		}
		if b.left == 0 && b.rng.Float64() < b.blipRate {
			b.left, b.height = b.blipLen, 4+4*b.rng.Float64()
		}
		rs[k][0] = 0.3 * b.rng.ExpFloat64()
		if b.left > 0 {
			rs[k][0] = b.height
			b.left--
		}
		b.x = 0.95*b.x + math.Sqrt(1-0.95*0.95)*b.rng.NormFloat64()
		rs[k][1] = 0.5 + 0.2*b.x
		if drift != nil {
			rs[k][1] += drift(k)
		}
	}
	return ts, rs
}

// TestOnSpanShortFrames: at 5 s frames, blips of 3 frames in one statistic
// pass the default on-delay of 3 of 5 frames (25 s), and the false-alert
// budget (alerts.budget 0.5 a day, calibrated on 4 held-out days by the
// GEV of block maxima, Coles 2001 ch. 3) raises the unit's one limit scale
// above them; a slow drift of the other statistic to 1.4 times its limit
// over 10 hours is then never reported. With the window spanning 50 s
// (alerts.on_span: 6 of 10 frames) the blips no longer pass, the scale
// falls to the quiet statistics' level and the drift is reported, at a
// false-alert rate over 30 further normal days within a factor 2 of the
// budget (the issue's target for the calibrated rule). The on-delay "N of
// M" rule itself is common alarm-management practice.
func TestOnSpanShortFrames(t *testing.T) {
	const period = 5 * time.Second
	const day = 17280 // frames of 5 s
	const budget = 0.5
	t0 := time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC)
	for _, c := range []struct {
		name   string
		n, m   int
		report bool
	}{
		{"3 of 5 frames (25 s)", 3, 5, false},
		{"on_span 50 s", 0, 0, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			n, m := c.n, c.m
			if n == 0 {
				n, m = alerts.SpanOnDelay(alerts.DefaultOnCount, alerts.DefaultOnWindow, period, alerts.DefaultOnSpan)
			}
			rule := alerts.AlarmRule{N: n, M: m, OffDelay: 5 * time.Minute, Deadband: 0.05}
			plant := &blipPlant{rng: rand.New(rand.NewPCG(5, 17)), blipRate: 1.0 / 8000, blipLen: 3}
			ht, hr := plant.series(t0, 4*day, nil)
			cal, err := CalibrateBudget(ht, hr, budget, rule, 4)
			if err != nil {
				t.Fatal(err)
			}
			// Fresh normal days: the measured false-alert rate.
			nt, nr := plant.series(t0.Add(4*24*time.Hour), 30*day, nil)
			rate := float64(countAlerts(nt, nr, cal.Scale, rule)) / 30
			// A drift of the second statistic, 0 to +0.9 (1.4 times its
			// limit with the mean 0.5) over 10 hours.
			const ramp = 10 * 720
			dt, dr := plant.series(t0.Add(34*24*time.Hour), ramp, func(k int) float64 { return 0.9 * float64(k) / ramp })
			found := countAlerts(dt, dr, cal.Scale, rule) > 0
			t.Logf("rule %d/%d: scale %.3f, expected %.2f/day [%.2f, %.2f], measured %.2f/day over 30 days, drift reported %v",
				n, m, cal.Scale, cal.Rate, cal.RateLow, cal.RateHigh, rate, found)
			if found != c.report {
				t.Errorf("drift reported %v, want %v (scale %.3f)", found, c.report, cal.Scale)
			}
			if c.report && !(rate <= 2*budget) {
				t.Errorf("measured %.2f false alerts a day, budget %v (target within a factor 2)", rate, budget)
			}
		})
	}
}

// TestAlertsConfigOnSpan: at 5 s frames the default on-delay becomes 6 of
// 10; an on_delay the configuration sets is kept, unless it sets on_span
// too; at 20 s frames the default is kept.
func TestAlertsConfigOnSpan(t *testing.T) {
	rule := func(c *configs.Config, period time.Duration) string {
		r := AlertsConfigAt(c, period).Rules
		return fmt.Sprintf("%d/%d", r.OnCount, r.OnWindow)
	}
	def := &configs.Config{}
	def.ApplyDefaults()
	one := &configs.Config{Alerts: configs.Alerts{OnDelay: configs.OnDelay{N: 1, M: 1}}}
	one.ApplyDefaults()
	both := &configs.Config{Alerts: configs.Alerts{OnDelay: configs.OnDelay{N: 1, M: 1}, OnSpan: 20 * time.Second}}
	both.ApplyDefaults()
	for _, c := range []struct {
		name   string
		cfg    *configs.Config
		period time.Duration
		want   string
	}{
		{"default at 5 s", def, 5 * time.Second, "6/10"},
		{"default at 20 s", def, 20 * time.Second, "3/5"},
		{"default, no period", def, 0, "3/5"},
		{"1 of 1 at 5 s", one, 5 * time.Second, "1/1"},
		{"1 of 1 and on_span 20s at 5 s", both, 5 * time.Second, "4/4"},
	} {
		if got := rule(c.cfg, c.period); got != c.want {
			t.Errorf("%s: on-delay %s, want %s", c.name, got, c.want)
		}
	}
}

// TestBudgetPerStatistic: the AR(1) plant of TestBudgetAR1, and in its
// held-out days a daily move to an operating point the model never saw,
// which only T² sees (its ratio ×8 for two hours a day, SPE and φ
// untouched). The single scale is then set by those excursions (above
// their rule peaks), while
// alerts.budget_per_statistic leaves SPE's scale near the scale the clean
// held-out days give, keeps the whole rule at the per-statistic scales
// within the budget's share of held-out alerts, and, on the clean days,
// meets the budget: the rate measured over 100 further days lies within
// the calibration's 95 % interval (invented series, seeded; derived check).
func TestBudgetPerStatistic(t *testing.T) {
	tr, a, rule, t0 := fittedAR1(t)
	const period, day = time.Minute, 24 * 60
	const budget = 1.0
	ct, cr := ratiosOf(t, tr, a, t0, period, 10*day)
	clean, err := CalibrateBudget(ct, cr, budget, rule, 5)
	if err != nil {
		t.Fatal(err)
	}
	calibrateEach(&clean, ct, cr, rule)
	if len(clean.Scales) != 3 {
		t.Fatalf("per-statistic scales %v, want t2, spe and phi", clean.Scales)
	}
	lt, lr := ratiosOf(t, tr, a, t0.Add(10*day*period), period, 100*day)
	var sc [nStatistics]float64
	for j, n := range statNames {
		sc[j] = clean.Scales[n]
	}
	got := float64(countAlertsEach(lt, lr, sc, rule)) / 100
	t.Logf("clean held-out: single ×%.3f, per statistic %v, expected %.3f/day [%.3f, %.3f]; measured %.2f/day over 100 days",
		clean.Scale, clean.Scales, clean.Rate, clean.RateLow, clean.RateHigh, got)
	if got < clean.RateLow || got > clean.RateHigh {
		t.Errorf("measured %.2f false alerts/day at the per-statistic scales, outside the calibration's interval [%.3f, %.3f]", got, clean.RateLow, clean.RateHigh)
	}

	// The same held-out days with a T²-only excursion on day 3.
	moved := make([][nStatistics]float64, len(cr))
	copy(moved, cr)
	for d := range 10 {
		for k := d*day + 600; k < d*day+720; k++ {
			moved[k][0] *= 8
		}
	}
	cal, err := CalibrateBudget(ct, moved, budget, rule, 5)
	if err != nil {
		t.Fatal(err)
	}
	single := cal.Scale
	calibrateEach(&cal, ct, moved, rule)
	t.Logf("with the move: single ×%.3f, per statistic %v, held-out alerts %d", single, cal.Scales, cal.Observed)
	level := math.Inf(1)
	s := ruleStat(moved, 0, rule)
	for d := range 10 {
		peak := 0.0
		for _, v := range s[d*day+600 : d*day+720] {
			peak = math.Max(peak, v)
		}
		for _, v := range []float64{peak} {
			level = math.Min(level, v) // the smallest of the moves' peaks
		}
	}
	if single < 0.9*level {
		t.Errorf("single scale ×%.3f below the moves' smallest rule peak %.3f: the series does not exercise the case", single, level)
	}
	if spe := cal.Scales[alerts.StatSPE]; !(spe < 0.5*single) || spe > 1.25*clean.Scales[alerts.StatSPE] {
		t.Errorf("SPE scale ×%.3f: want well below the single ×%.3f and near the clean ×%.3f", spe, single, clean.Scales[alerts.StatSPE])
	}
	if allow := int(heldOutAllowance(budget, cal.HeldOutDays)); cal.Observed > allow {
		t.Errorf("the per-statistic rule opens %d alerts over the held-out days, %d allowed", cal.Observed, allow)
	}
}

// TestGumbelLevel: gumbelLevel inverts gumbelY, and on the standard
// Gumbel scale −log(−log G(z)) reproduces G (derived check).
func TestGumbelLevel(t *testing.T) {
	for _, xi := range []float64{-0.3, 0, 0.2} {
		g := gevOf(1.5, 0.4, xi)
		for _, y := range []float64{-1, 0, 2, 6} {
			z := gumbelLevel(g, y)
			if back := gumbelY(g, z); math.Abs(back-y) > 1e-9 {
				t.Errorf("ξ=%v y=%v: gumbelY(gumbelLevel) = %v", xi, y, back)
			}
			if want := math.Exp(-math.Exp(-y)); math.Abs(g.CDF(z)-want) > 1e-12 {
				t.Errorf("ξ=%v y=%v: G(z) = %v, want %v", xi, y, g.CDF(z), want)
			}
		}
	}
}

func gevOf(mu, sigma, xi float64) limits.GEV { return limits.GEV{Mu: mu, Sigma: sigma, Xi: xi} }

// TestFrameStats: model.statistics picks the statistics, model.smoothing
// replaces each by the EWMA of its ratio to its limit (hand-computed:
// ratios 4, 0, 2 at λ = 0.5 give 4, 2, 2), and the budget scale multiplies
// every limit handed to the alarm engine until DropCalibration.
func TestFrameStats(t *testing.T) {
	u := &Unit{stats: configs.Statistics{T2: true, Residual: true}, scale: 1}
	s := &tracker.Score{T2: 8, T2Limit: 2, SPE: 1, SPELimit: 1, Residual: 3, ResidualLimit: 6}
	u.frameStats(s)
	got := u.appendStats(nil)
	want := []alerts.Stat{{Name: alerts.StatT2, Value: 8, Limit: 2}, {Name: alerts.StatResidual, Value: 3, Limit: 6}}
	if len(got) != 2 || got[0] != want[0] || got[1] != want[1] {
		t.Fatalf("stats %+v, want %+v", got, want)
	}
	u.scale = 1.5
	if got := u.appendStats(nil); got[0].Limit != 3 || got[1].Limit != 9 {
		t.Errorf("scaled limits %v, %v; want 3, 9", got[0].Limit, got[1].Limit)
	}
	if u.LimitScale() != 1.5 {
		t.Errorf("LimitScale %v, want 1.5", u.LimitScale())
	}
	u.DropCalibration()
	if got := u.appendStats(nil); got[0].Limit != 2 || u.LimitScale() != 1 {
		t.Errorf("after DropCalibration: limit %v, scale %v; want 2, 1", got[0].Limit, u.LimitScale())
	}
	u = &Unit{stats: configs.Statistics{T2: true}, scale: 1, smooth: 0.5}
	for i, c := range []struct{ v, want float64 }{{8, 4}, {0, 2}, {4, 2}} {
		u.frameStats(&tracker.Score{T2: c.v, T2Limit: 2})
		if len(u.last) != 1 || u.last[0].Value != c.want || u.last[0].Limit != 1 {
			t.Errorf("frame %d: %+v, want value %v against limit 1", i, u.last, c.want)
		}
	}
}

// TestLeadRelation: on an invented 5-channel unit where c = a + b holds to
// 1 % (d and e loose), one relation mode finds {a, b, c}; a frame that
// breaks it raises the relation statistic over its limit, and the
// contributors handed to the alarm engine start with a, b and c.
func TestLeadRelation(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	frame := func() []float64 {
		a, b := rng.NormFloat64(), rng.NormFloat64()
		return []float64{a, b, a + b + 0.01*rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
	}
	tr, err := tracker.New(5, tracker.Config{Period: time.Second, Relations: 1, Modes: modes.Config{Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	rows := make([][]float64, 5000)
	for k := range rows {
		rows[k] = frame()
	}
	if err := tr.Fit(rows); err != nil {
		t.Fatal(err)
	}
	if got := tr.RelationSupport(0); !slices.Equal(got, []int{0, 1, 2}) {
		t.Fatalf("relation mode %v, want [0 1 2]", got)
	}
	u := &Unit{tr: tr, names: []string{"a", "b", "c", "d", "e"}, stats: configs.Statistics{T2: true, SPE: true, Relation: true}, scale: 1}
	x := frame()
	x[2] += 0.2
	if err := tr.Evaluate(&u.score, x, nil); err != nil {
		t.Fatal(err)
	}
	s := &u.score
	if !(s.Relation > s.RelationLimit) {
		t.Fatalf("relation statistic %v under its limit %v", s.Relation, s.RelationLimit)
	}
	o := &alerts.Observation{Contributors: []alerts.Contributor{{Channel: "d", RBC: 9}, {Channel: "c", RBC: 5}}}
	u.leadRelation(o, s)
	var got []string
	for _, c := range o.Contributors {
		got = append(got, c.Channel)
	}
	if !slices.Equal(got, []string{"a", "b", "c", "d"}) || o.Contributors[2].RBC != 5 {
		t.Errorf("contributors %v (c's RBC %v), want a, b, c (RBC 5), d", got, o.Contributors[2].RBC)
	}
}

// rateProcess is a seeded process of held-out ratios with a known true
// alert rate per day at any scale under its alarm rule.
type rateProcess struct {
	name   string
	rule   alerts.AlarmRule
	period time.Duration
	gen    func(rng *rand.Rand, start time.Time, n int) ([]time.Time, [][nStatistics]float64)
	truth  func(c float64) float64
}

// gumbelProcess: iid standard Gumbel ratios shifted by 1, one frame a
// minute, the rule 1 of 1 with no off-delay. An alert opens at frame k
// exactly when frame k is over the scale and frame k−1 is not, so the
// true rate is 1440·q(1−q) a day, q = 1 − exp(−e^(−(c−1))) the Gumbel's
// exceedance probability (hand derivation).
func gumbelProcess() rateProcess {
	return rateProcess{
		name: "exact Gumbel, rule 1 of 1", rule: alerts.AlarmRule{N: 1, M: 1}, period: time.Minute,
		gen: func(rng *rand.Rand, start time.Time, n int) ([]time.Time, [][nStatistics]float64) {
			return gumbelRatios(rng, 1, start, time.Minute, n)
		},
		truth: func(c float64) float64 {
			q := -math.Expm1(-math.Exp(-(c - 1)))
			return 1440 * q * (1 - q)
		},
	}
}

// chiAR1 returns n frames one minute apart of the ratio x₁² + x₂² + x₃²
// to χ²₃'s 99 % point 11.3449 (three independent AR(1) channels of unit
// variance, coefficient phi per frame): a serially correlated statistic.
func chiAR1(phi float64) func(rng *rand.Rand, start time.Time, n int) ([]time.Time, [][nStatistics]float64) {
	return func(rng *rand.Rand, start time.Time, n int) ([]time.Time, [][nStatistics]float64) {
		const chi3at99 = 11.344866730144373 // χ²₃ 0.99 quantile (gonum distuv.ChiSquared; tables give 11.345)
		x := [3]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
		s := math.Sqrt(1 - phi*phi)
		ts := make([]time.Time, n)
		rs := make([][nStatistics]float64, n)
		for k := range n {
			q := 0.0
			for i := range x {
				x[i] = phi*x[i] + s*rng.NormFloat64()
				q += x[i] * x[i]
			}
			ts[k] = start.Add(time.Duration(k) * time.Minute)
			rs[k] = [nStatistics]float64{q / chi3at99, math.NaN(), math.NaN(), math.NaN(), math.NaN(), math.NaN()}
		}
		return ts, rs
	}
}

// ar1Process: chiAR1 with φ = 0.9 under the rule 3 of 5 with a 10-minute
// off-delay. Its true rate has no closed form: it is measured once over a
// long run of the same process (days days, seeded) at scales 2 % apart
// and interpolated on the log scale.
func ar1Process(days int) rateProcess {
	p := rateProcess{name: "AR(1) χ², rule 3 of 5", rule: alerts.AlarmRule{N: 3, M: 5, OffDelay: 10 * time.Minute}, period: time.Minute, gen: chiAR1(0.9)}
	lt, lr := p.gen(rand.New(rand.NewPCG(99, 1)), time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC), days*1440)
	var grid, rate []float64
	for c := 0.8; c < 4; c *= 1.02 {
		grid = append(grid, c)
		rate = append(rate, (float64(countAlerts(lt, lr, c, p.rule))+0.5)/float64(days))
	}
	p.truth = func(c float64) float64 {
		i, _ := slices.BinarySearch(grid, c)
		i = min(max(i, 1), len(grid)-1)
		w := (c - grid[i-1]) / (grid[i] - grid[i-1])
		return math.Exp(math.Log(rate[i-1]) + w*(math.Log(rate[i])-math.Log(rate[i-1])))
	}
	return p
}

// TestStatedRateCoverage: the whole calibration (CalibrateBudget, budget
// 0.25 a day, as fit runs it) on 2 and 4 held-out days (20 block maxima),
// repeated on seeded processes with a known true rate at any scale
// (derived checks: simulations of the method against its own statement):
//
//   - the stated rate's 95 % interval [RateLow, RateHigh] holds the true
//     rate at the calibrated scale in 95 % of the repeats, within three
//     binomial standard errors plus 0.02;
//   - the stated rates summed over the repeats are within 25 % of the
//     true rates summed (the rate is about unbiased), while the GEV's own
//     rate at the same scales (GEVRate) falls short by more than a fifth:
//     the case this statement fixes;
//   - the 7-day predictive interval (Predict) holds the count of a
//     further 7 days of the same process about as often as it states
//     (coverage, as TestPredictCoverage, slack 0.02).
//
// In this run (exact Gumbel, 2 and 4 days; AR(1) φ = 0.9, 4 days): the
// figures are logged and in the README's budget section.
func TestStatedRateCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("long run")
	}
	const budget, repeats, horizon = 0.25, 200, 7
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	gum, ar := gumbelProcess(), ar1Process(300)
	for _, c := range []struct {
		p    rateProcess
		days int
		seed uint64
	}{{gum, 2, 21}, {gum, 4, 41}, {ar, 4, 43}} {
		t.Run(c.p.name+", "+time.Duration(c.days*24*int(time.Hour)).String(), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(c.seed, 13))
			var v coverage
			var in, raised, n, failed int
			var stated, gev, truth float64
			for range repeats {
				ct, cr := c.p.gen(rng, t0, c.days*1440)
				cal, err := CalibrateBudget(ct, cr, budget, c.p.rule, float64(c.days))
				lt, lr := c.p.gen(rng, t0.Add(time.Duration(c.days)*24*time.Hour), horizon*1440)
				if err != nil {
					// fit leaves such a unit at its α limits.
					failed++
					t.Logf("%v", err)
					continue
				}
				n++
				tr := c.p.truth(cal.Scale)
				stated += cal.Rate
				gev += cal.GEVRate
				truth += tr
				if cal.RateLow <= tr && tr <= cal.RateHigh {
					in++
				}
				if cal.GEVScale > 0 {
					raised++
				}
				v.add(cal, horizon, countAlerts(lt, lr, cal.Scale, c.p.rule))
			}
			if failed > repeats/50 {
				t.Errorf("%d of %d calibrations failed", failed, repeats)
			}
			share := float64(in) / float64(n)
			t.Logf("%d repeats (%d raised): true rate in the stated interval %.3f; mean stated %.3f, GEV's %.3f, true %.3f a day; 7 days: %v",
				n, raised, share, stated/float64(n), gev/float64(n), truth/float64(n), &v)
			if se := math.Sqrt(0.95 * 0.05 / float64(n)); math.Abs(share-0.95) > 3*se+0.02 {
				t.Errorf("the stated interval held the true rate in %.3f of %d repeats, want 0.95 (±%.3f)", share, n, 3*se+0.02)
			}
			if r := stated / truth; r < 0.8 || r > 1.25 {
				t.Errorf("stated rates sum to %.2f × the true ones, want within 25 %%", r)
			}
			if r := gev / truth; r > 0.8 {
				t.Errorf("the GEV's own rates sum to %.2f × the true ones: expected it to fall short by a fifth (the case this fixes)", r)
			}
			v.check(t, 0.02)
		})
	}
}

// TestHeldOutExposure: n frames one period apart stand for n periods
// (hand derivation), so 4 days of one-minute frames are 4 days and the
// budget of 0.25 a day allows them one held-out alert.
func TestHeldOutExposure(t *testing.T) {
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	ts, _ := gumbelRatios(rand.New(rand.NewPCG(1, 1)), 0, t0, time.Minute, 4*1440)
	if d := heldOutExposureDays(ts); !scalar.EqualWithinAbsOrRel(d, 4, 1e-12, 1e-12) || math.Floor(0.25*d) != 1 {
		t.Errorf("exposure %.6f days, want 4 (one alert allowed at 0.25 a day)", d)
	}
	if d := heldOutExposureDays(ts[:1]); d != 0 {
		t.Errorf("one frame: %v days, want 0", d)
	}
}

// TestStateRateAnchor checks stateRate on a hand-built case: a rule whose
// held-out count at multiplier x of the scale is the number of the levels
// 2, 1.5 and 1.2 above x (three excursions), a GEV, and 4 held-out days.
//
//   - at the final scale c = 1.6 the rule opens 1 alert (the level 2);
//     the anchor is L₂ = 1.5, r = Λ(c)/Λ(L₂) of the GEV and
//     the rate is 2/4 · r (standard error 1/√2 of it with no GEV
//     covariance), in Garwood's exact interval for 1 alert in 4 days;
//   - after a raise (an excursion just under the final scale) r = 1 and
//     the rate is (j+1)/D, the Gamma(j+1) pivot;
//   - with no excursion below the scale the GEV's rate is stated.
func TestStateRateAnchor(t *testing.T) {
	g := limits.GEVFit{GEV: limits.GEV{Mu: 1, Sigma: 0.3, Xi: 0.1}}
	levels := []float64{2, 1.5, 1.2}
	const c, perDay = 1.6, 5.0
	countAt := func(lv []float64) func(x float64) int {
		return func(x float64) int {
			k := 0
			for _, l := range lv {
				if l > c*x {
					k++
				}
			}
			return k
		}
	}
	exceed := func(g limits.GEV, x float64) float64 { return g.Exceed(c * x) }
	lam := func(z float64) float64 { return -math.Log1p(-g.Exceed(z)) }

	cal := Calibration{HeldOutDays: 4, Observed: 1}
	cal.stateRate(g, exceed, countAt(levels), perDay)
	r := lam(c) / lam(1.5)
	want := 2.0 / 4 * r
	if !scalar.EqualWithinAbsOrRel(cal.Rate, want, 1e-6, 1e-6) || !scalar.EqualWithinAbsOrRel(cal.RateSE, want/math.Sqrt2, 1e-6, 1e-6) {
		t.Errorf("anchored: rate %.6g ± %.6g, want %.6g ± %.6g", cal.Rate, cal.RateSE, want, want/math.Sqrt2)
	}
	// Garwood's exact interval for 1 alert in 4 days: χ²₂(0.025)/8 and
	// χ²₄(0.975)/8 = 0.0506356/8 and 11.1433/8 (statistical tables).
	if !scalar.EqualWithinAbsOrRel(cal.RateLow, 0.0506356/8, 1e-5, 1e-5) || !scalar.EqualWithinAbsOrRel(cal.RateHigh, 11.1433/8, 1e-5, 1e-5) {
		t.Errorf("anchored: interval [%.6g, %.6g], want Garwood's [%.6g, %.6g]", cal.RateLow, cal.RateHigh, 0.0506356/8, 11.1433/8)
	}
	if !scalar.EqualWithinAbsOrRel(cal.GEVRate, lam(c)*perDay, 1e-12, 1e-12) {
		t.Errorf("GEV rate %.6g, want −ln(1−P)·perDay = %.6g", cal.GEVRate, lam(c)*perDay)
	}
	if cal.Week == nil || cal.Week.Expected != cal.Rate*PredictWeekDays {
		t.Errorf("week %+v, want the prediction at the stated rate", cal.Week)
	}

	raised := Calibration{HeldOutDays: 4, Observed: 0}
	raised.stateRate(g, exceed, countAt([]float64{c * (1 - 1e-8)}), perDay)
	if !scalar.EqualWithinAbsOrRel(raised.Rate, 0.25, 1e-12, 1e-12) || !scalar.EqualWithinAbsOrRel(raised.RateSE, 0.25, 1e-12, 1e-12) {
		t.Errorf("raised: rate %.6g ± %.6g, want 1/4 ± 1/4 (Gamma(1)/D)", raised.Rate, raised.RateSE)
	}
	// Exponential quantiles: −ln(0.975)/4 and −ln(0.025)/4.
	if !scalar.EqualWithinAbsOrRel(raised.RateLow, -math.Log(0.975)/4, 1e-9, 1e-9) || !scalar.EqualWithinAbsOrRel(raised.RateHigh, -math.Log(0.025)/4, 1e-9, 1e-9) {
		t.Errorf("raised: interval [%.6g, %.6g], want [%.6g, %.6g]", raised.RateLow, raised.RateHigh, -math.Log(0.975)/4, -math.Log(0.025)/4)
	}

	none := Calibration{HeldOutDays: 4, Observed: 0}
	none.stateRate(g, exceed, countAt(nil), perDay)
	if none.Rate != none.GEVRate || none.RateSE != 0 {
		t.Errorf("no anchor: rate %.6g ± %.6g, want the GEV's %.6g (zero covariance: no error)", none.Rate, none.RateSE, none.GEVRate)
	}
}

// TestSerialLearnerAutocorr: the one-pass autocorrelation fit learns for a
// channel's profile agrees with a direct computation over the stored
// series, gonum/stat's Pearson correlation of x[k:] with x[:n−k], within
// 0.01 (the two differ only in the means they subtract), at every lag
// kept; lags with fewer than 4k pairs are not kept, and a missing value
// drops its pairs only. Seeded AR(1) series, φ = 0.99, with one frame in
// 50 missing. Invented data.
func TestSerialLearnerAutocorr(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 9))
	const n, phi = 20000, 0.99
	x := make([]float64, n)
	var sl serialLearner
	v := 0.0
	for k := range x {
		v = phi*v + math.Sqrt(1-phi*phi)*rng.NormFloat64()
		x[k] = 50 + v
		if rng.IntN(50) == 0 {
			x[k] = math.NaN()
		}
		sl.add(x[k], !math.IsNaN(x[k]))
	}
	got := sl.autocorr()
	wantLen := 0
	for m := 0; m < tracker.SerialLags && serialMinPairs*tracker.SerialLag(m) <= n*49/50; m++ {
		wantLen = m + 1
	}
	if len(got) != wantLen {
		t.Fatalf("kept %d lags, want %d", len(got), wantLen)
	}
	for m, r := range got {
		k := tracker.SerialLag(m)
		var a, b []float64
		for i := k; i < n; i++ {
			if !math.IsNaN(x[i]) && !math.IsNaN(x[i-k]) {
				a, b = append(a, x[i]), append(b, x[i-k])
			}
		}
		want := stat.Correlation(a, b, nil)
		if !scalar.EqualWithinAbs(r, want, 0.01) {
			t.Errorf("lag %d: ρ = %.4f, gonum/stat %.4f", k, r, want)
		}
	}
	// Constant channel: no autocorrelation.
	var c serialLearner
	for range 100 {
		c.add(3, true)
	}
	if r := c.autocorr(); r != nil {
		t.Errorf("constant channel: %v, want nil", r)
	}
}

// calibrateSmoothedAR1 calibrates a budget of budget false alerts a day
// (five learning days, scales by group) on the first ten days, a minute
// apart from t0, of the fitted AR(1) plant's ratios (fittedAR1), after
// smooth has written its smoothed statistics into them.
func calibrateSmoothedAR1(t *testing.T, tr *tracker.Tracker, a *ar1Plant, rule alerts.AlarmRule, t0 time.Time, budget float64, smooth func([][nStatistics]float64)) Calibration {
	t.Helper()
	ct, cr := ratiosOf(t, tr, a, t0, time.Minute, 10*24*60)
	smooth(cr)
	rr := &RatioRecorder{units: map[string]*ratioSeries{"u": {t: ct, r: cr, spread: make([]bool, len(ct))}}}
	cal, err := rr.Calibrate("u", budget, rule, 5, false, false, 0)
	if err != nil {
		t.Fatal(err)
	}
	return cal
}

// TestBudgetMewmaOwnScale: the AR(1) plant of TestBudgetAR1 with a fourth,
// smoothed statistic in the MEWMA slot (the EWMA, λ = 0.02, of its SPE
// ratio, times (2 − λ)/λ: far more serially correlated than the per-frame
// ratios and on another scale). The calibration gives it a scale of its
// own and T², SPE and φ one scale together, keeps the whole rule within
// the budget's share of held-out alerts, and the rate measured over 100
// further days lies within the calibration's 95 % interval (invented
// series, seeded; derived check).
func TestBudgetMewmaOwnScale(t *testing.T) {
	tr, a, rule, t0 := fittedAR1(t)
	const period, day = time.Minute, 24 * 60
	const budget, lam = 1.0, 0.02
	smooth := func(r [][nStatistics]float64) {
		z := 0.0
		for k := range r {
			z += lam * (r[k][1] - z)
			r[k][slotMewma] = (2 - lam) / lam * z
		}
	}
	cal := calibrateSmoothedAR1(t, tr, a, rule, t0, budget, smooth)
	t.Logf("scales %v, single ×%.3f, expected %.3f/day [%.3f, %.3f], held-out alerts %d", cal.Scales, cal.Scale, cal.Rate, cal.RateLow, cal.RateHigh, cal.Observed)
	m, ok := cal.Scales[alerts.StatMewma]
	if !ok || cal.Scales[alerts.StatT2] != cal.Scales[alerts.StatSPE] || cal.Scales[alerts.StatSPE] != cal.Scales[alerts.StatPhi] {
		t.Fatalf("scales %v: want one for t2, spe and phi together and one for mewma", cal.Scales)
	}
	if m < 2*cal.Scales[alerts.StatSPE] {
		t.Errorf("mewma ×%.3f, spe ×%.3f: the smoothed statistic's heavier tail should give it the larger scale", m, cal.Scales[alerts.StatSPE])
	}
	if allow := heldOutAllowance(budget, cal.HeldOutDays); float64(cal.Observed) > allow {
		t.Errorf("%d held-out alerts, allowance %.2f", cal.Observed, allow)
	}
	lt, lr := ratiosOf(t, tr, a, t0.Add(10*day*period), period, 100*day)
	smooth(lr)
	var sc [nStatistics]float64
	for j, n := range statNames {
		sc[j] = cal.Scales[n]
	}
	got := float64(countAlertsEach(lt, lr, sc, rule)) / 100
	t.Logf("measured %.2f false alerts/day over 100 days", got)
	if got < cal.RateLow || got > cal.RateHigh {
		t.Errorf("measured %.2f false alerts/day, outside the calibration's interval [%.3f, %.3f]", got, cal.RateLow, cal.RateHigh)
	}
}

// TestBudgetSmoothedOwnScales: the AR(1) plant of TestBudgetMewmaOwnScale
// with two smoothed statistics, in the MEWMA slot (λ = 0.02) and in the
// creep slot (λ = 0.1, a shorter memory, on its own scale): each gets a
// scale of its own, T², SPE and φ one together, the heavier-tailed
// smoothed statistic the larger, and the whole rule stays within the
// budget's share of held-out alerts (invented series, seeded; derived
// check).
func TestBudgetSmoothedOwnScales(t *testing.T) {
	tr, a, rule, t0 := fittedAR1(t)
	const budget = 1.0
	smooth := func(r [][nStatistics]float64) {
		z, c := 0.0, 0.0
		for k := range r {
			z += 0.02 * (r[k][1] - z)
			c += 0.1 * (r[k][1] - c)
			r[k][slotMewma] = (2 - 0.02) / 0.02 * z
			r[k][slotCreep] = c
		}
	}
	cal := calibrateSmoothedAR1(t, tr, a, rule, t0, budget, smooth)
	t.Logf("scales %v, held-out alerts %d", cal.Scales, cal.Observed)
	m, okM := cal.Scales[alerts.StatMewma]
	c, okC := cal.Scales[alerts.StatCreep]
	s := cal.Scales[alerts.StatSPE]
	if !okM || !okC || cal.Scales[alerts.StatT2] != s || cal.Scales[alerts.StatPhi] != s {
		t.Fatalf("scales %v: want one for t2, spe and phi together, one for mewma, one for creep", cal.Scales)
	}
	if m == c || c == s {
		t.Errorf("mewma ×%.3f, creep ×%.3f, spe ×%.3f: want three different scales", m, c, s)
	}
	if allow := heldOutAllowance(budget, cal.HeldOutDays); float64(cal.Observed) > allow {
		t.Errorf("%d held-out alerts, allowance %.2f", cal.Observed, allow)
	}
}
