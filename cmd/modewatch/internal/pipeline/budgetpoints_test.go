package pipeline

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
)

// pointLog is a hand-made held-out log of four days at one frame a
// minute: every statistic's ratio to its limit wanders at 0.3–0.9 (an
// AR(1) of |N(0, 1)| scale, invented data), and T² and φ make the
// excursions of each case at three times their limit, with SPE and the
// residual statistics untouched (T² and φ alone, as a move to a new
// operating point shows). spread marks the frames where no channel
// explains alerts.PointShare of the index.
type pointCase struct {
	name string
	// start offsets and lengths of the T² excursions; conc: their frames
	// are concentrated on one channel.
	at   []time.Duration
	span time.Duration
	conc bool
	// the calibrated scale must stay under 2 (the wander sets it) or
	// rise over 3 (an excursion counts as an alert)
	off, on bool // true: over 3
}

func pointLog(c pointCase) (*RatioRecorder, []time.Time) {
	const n = 4 * 1440
	rng := rand.New(rand.NewPCG(21, 5))
	start := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	ser := &ratioSeries{}
	var x [nStatistics]float64
	for k := range n {
		tk := start.Add(time.Duration(k) * time.Minute)
		var row [nStatistics]float64
		for j := range row {
			x[j] = 0.9*x[j] + math.Sqrt(1-0.81)*rng.NormFloat64()
			row[j] = 0.3 + 0.2*math.Abs(x[j])
		}
		spread := true
		for _, a := range c.at {
			if d := tk.Sub(start) - a; d >= 0 && d < c.span {
				row[pointStats[0]], row[pointStats[1]] = 3, 3
				spread = !c.conc
			}
		}
		ser.t = append(ser.t, tk)
		ser.r = append(ser.r, row)
		ser.spread = append(ser.spread, spread)
	}
	return &RatioRecorder{units: map[string]*ratioSeries{"u": ser}}, ser.t
}

// TestCalibratePoints checks alerts.calibrate_points against the
// new-operating-point rule it mirrors (alerts/newpoint.go; design choices
// of this project, not an outside reference): excursions of T² alone,
// spread over the channels and apart by more than accept_after, raise the
// calibrated scale with the setting off and not with it on; a
// single-channel T² excursion, one lasting longer than alerts.PointSettle,
// and a second spread excursion within accept_after of the first (each an
// alert in the service) raise it either way.
func TestCalibratePoints(t *testing.T) {
	rule := alerts.AlarmRule{N: 3, M: 5, OffDelay: 2 * time.Minute, Deadband: 0.05}
	accept := alerts.DefaultAcceptAfter
	h := time.Hour
	for _, c := range []pointCase{
		{name: "none"},
		{name: "spread", at: []time.Duration{6 * h, 16 * h, 26 * h, 40 * h, 52 * h, 66 * h, 80 * h}, span: 20 * time.Minute, off: true},
		{name: "one channel", at: []time.Duration{6 * h, 40 * h, 80 * h}, span: 20 * time.Minute, conc: true, off: true, on: true},
		{name: "past the settling time", at: []time.Duration{40 * h}, span: 90 * time.Minute, off: true, on: true},
		{name: "twice within accept_after", at: []time.Duration{40 * h, 42 * h}, span: 20 * time.Minute, off: true, on: true},
	} {
		t.Run(c.name, func(t *testing.T) {
			rr, _ := pointLog(c)
			for _, points := range []bool{false, true} {
				cal, err := rr.Calibrate("u", 0.25, rule, 4, false, points, accept)
				if err != nil {
					t.Fatalf("calibrate_points %v: %v", points, err)
				}
				want := c.off
				if points {
					want = c.on
				}
				if got := cal.Scale > 3; got != want || (!want && cal.Scale > 2) {
					t.Errorf("calibrate_points %v: scale %.3f, want over 3: %v (under 2 otherwise)", points, cal.Scale, want)
				}
				if cal.Observed != 0 {
					t.Errorf("calibrate_points %v: %d held-out alerts at scale %.3f, want 0", points, cal.Observed, cal.Scale)
				}
			}
		})
	}
}

// TestPointRatios checks the masking frame by frame on a short series: a
// spread frame keeps the least T² over the settling time, or its own
// value when an earlier spread frame between accept_after and the
// settling time before it was as high; concentrated frames, SPE and NaN
// are kept.
func TestPointRatios(t *testing.T) {
	start := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	step := 20 * time.Minute
	// frames 0..11 every 20 min: T² 2 at frame 0 (spread), 1 elsewhere
	// but 3 at frames 4 (spread, 80 min after frame 0), 6 (concentrated)
	// and 8 (spread); frame 9's T² is missing.
	t2 := []float64{2, 1, 1, 1, 3, 1, 3, 1, 3, math.NaN(), 1, 1}
	spread := []bool{true, true, true, true, true, true, false, true, true, true, true, true}
	spe := 0
	for statNames[spe] != alerts.StatSPE {
		spe++
	}
	var ts []time.Time
	var r [][nStatistics]float64
	for k, v := range t2 {
		ts = append(ts, start.Add(time.Duration(k)*step))
		var row [nStatistics]float64
		row[pointStats[0]], row[pointStats[1]] = v, v
		row[spe] = v
		r = append(r, row)
	}
	out := pointRatios(ts, r, spread, 4*time.Hour)
	// frame 4: least over (0:20, 1:20] is 1; the spread frames between
	// 4 h and 1 h before (frame 0, T² 2) cap it at min(3, 2) = 2.
	// frame 8: frame 4 (3) is within (−1:20, 1:40]: 3 counts.
	want := []float64{2, 1, 1, 1, 2, 1, 3, 1, 3, math.NaN(), 1, 1}
	for k := range out {
		for _, j := range pointStats {
			if g := out[k][j]; g != want[k] && !(math.IsNaN(g) && math.IsNaN(want[k])) {
				t.Errorf("frame %d statistic %s: %v, want %v", k, statNames[j], g, want[k])
			}
		}
		if out[k][spe] != r[k][spe] && !math.IsNaN(r[k][spe]) {
			t.Errorf("frame %d: SPE changed %v → %v", k, r[k][spe], out[k][spe])
		}
	}
}
