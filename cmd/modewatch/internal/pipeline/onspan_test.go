package pipeline

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

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
