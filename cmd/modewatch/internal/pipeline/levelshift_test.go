package pipeline

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/tracker"
)

// The level-shift rule end to end on a small invented plant (a behaviour
// test: the rule's figures are its own design, alerts.LevelShiftFactor and
// the window; the two-window statistic itself is checked against closed
// forms in tracker). One unit at 10 s: a load u(t) (a daily swing and a
// slow random walk) drives four channels, a fifth wanders on its own:
//
//	mix.line.a = 10 + 2u ± 0.1     mix.line.b = 5 + u ± 0.05
//	mix.line.c = 20 − 3u + 0.3u² ± 0.15    mix.line.d = 7 + u ± 0.1
//	mix.line.e = 3 + wander (AR(1), τ 2 h, σ 0.5) ± 0.05
//
// The load spans about ±1, so a bias of 0.15 on b (3 noise σ, about a
// tenth of b's range) stays inside b's normal range.
type lsEvents struct {
	bias func(k int) float64 // added to b at frame k
	load func(k int) float64 // added to the load u at frame k (a move of the operating point)
}

func lsPlant(from, to int, ev lsEvents, seed uint64) []byte {
	rng := rand.New(rand.NewPCG(seed, 11))
	var b bytes.Buffer
	walk, wander := 0.0, 0.0
	phi := math.Exp(-float64(qPeriod) / float64(2*time.Hour))
	for k := 0; k < to; k++ {
		walk = 0.999*walk + 0.01*rng.NormFloat64()
		wander = phi*wander + 0.5*math.Sqrt(1-phi*phi)*rng.NormFloat64()
		if k < from {
			continue
		}
		u := 0.7*math.Sin(2*math.Pi*float64(k)/qDay) + walk
		if ev.load != nil {
			u += ev.load(k)
		}
		bv := 5 + u + 0.05*rng.NormFloat64()
		if ev.bias != nil {
			bv += ev.bias(k)
		}
		ts := qStart.Add(time.Duration(k) * qPeriod).UnixNano()
		fmt.Fprintf(&b, "mix,asset=line a=%.4f,b=%.4f,c=%.4f,d=%.4f,e=%.4f %d\n",
			10+2*u+0.1*rng.NormFloat64(), bv, 20-3*u+0.3*u*u+0.15*rng.NormFloat64(), 7+u+0.1*rng.NormFloat64(),
			3+wander+0.05*rng.NormFloat64(), ts)
	}
	return b.Bytes()
}

// fit learns every analog channel's normal level step; a bias of b in the
// test day raises a level-shift alert naming b within two windows (10 min
// at the default 5 min window) and no level-shift alert on any channel
// outside the bias; the same test day without the bias raises none.
func TestLevelShiftReplay(t *testing.T) {
	cfg := qConfig(t)
	m := fitBytes(t, cfg, lsPlant(0, 2*qDay, lsEvents{}, 3))
	for _, p := range m.Units[0].Quality {
		if !(p.LevelStepMax > 0) {
			t.Errorf("%s: no normal level step learned", p.Channel)
		}
	}
	from, to := 2*qDay, 3*qDay
	start, end := from+qDay/3, from+qDay/3+360 // 1 h of bias
	bias := lsEvents{bias: func(k int) float64 {
		if k >= start && k < end {
			return 0.15
		}
		return 0
	}}
	recs := qReplay(t, cfg, m, lsPlant(from, to, bias, 3))
	var found bool
	for _, r := range qualityOf(recs, alerts.QualityLevelShift, "") {
		d := r.Start.Sub(qStart.Add(time.Duration(start) * qPeriod))
		if r.Quality.Channel == "mix.line.b" && d >= 0 && d <= 10*time.Minute {
			found = true
			// Its size in b's unit: the other channels explain none of the
			// bias, so the unexplained step is about 0.15 (±0.05: about 5
			// standard errors of the difference of two 30-frame means of
			// b's residual given the others, whose σ is at most b's 0.05
			// noise); the windows' means differ by the bias plus the load's
			// move, its walk's steps of σ 0.01 over the 60 frames (σ 0.08).
			lv := r.Quality.Level
			if lv == nil {
				t.Errorf("level shift on b at %s: no size in its record", r.Start)
			} else if d := float64(lv.After - lv.Before); math.Abs(d-0.15) > 0.25 || math.Abs(float64(lv.Step)-0.15) > 0.05 ||
				time.Duration(lv.Window) != 5*time.Minute {
				t.Errorf("level shift on b: %v → %v (%+.3f), unexplained %.3f over %v windows; want a step of about 0.15 over 5m0s",
					lv.Before, lv.After, d, lv.Step, time.Duration(lv.Window))
			}
			if r.Peak.Statistic != alerts.QualityLevelShift || !(r.Peak.Ratio > 1) || r.Peak.Ratio != r.Peak.Value/r.Peak.Limit {
				t.Errorf("level shift on b: peak %+v, want the step over its threshold", r.Peak)
			}
			continue
		}
		if d < 0 || d > time.Duration(end-start)*qPeriod+10*time.Minute {
			t.Errorf("level shift outside the bias: %s at %s", r.Quality.Channel, r.Start)
		}
	}
	if !found {
		t.Errorf("no level shift on mix.line.b within 10 min of the bias at %s; records %v",
			qStart.Add(time.Duration(start)*qPeriod), qualityOf(recs, alerts.QualityLevelShift, ""))
	}
	if got := qualityOf(qReplay(t, cfg, m, lsPlant(from, to, lsEvents{}, 3)), alerts.QualityLevelShift, ""); len(got) != 0 {
		t.Errorf("%d level-shift alerts without the bias: first %s at %s", len(got), got[0].Quality.Channel, got[0].Start)
	}
	// A move of the load to four times its normal swing over 15 min
	// (every channel with it, c's curvature beyond its linear fit by about
	// 4 of its noise σ at the new point): T² over its limit, the move is
	// not a shift of one reading.
	move := lsEvents{load: func(k int) float64 { return 3 * min(max(float64(k-start)/90, 0), 1) }}
	if got := qualityOf(qReplay(t, cfg, m, lsPlant(from, to, move, 3)), alerts.QualityLevelShift, ""); len(got) != 0 {
		t.Errorf("%d level-shift alerts at a move of the load: first %s at %s", len(got), got[0].Quality.Channel, got[0].Start)
	}
}

// TestLevelHoldCoversWindows: the ages a screen's snapshot carries for
// the level-shift rule (alerts.MaxLevelHold) cover the two windows of the
// longest level step the tracker takes (tracker.MaxLevelStepFrames), so a
// restored screen waits as long as the live one would.
func TestLevelHoldCoversWindows(t *testing.T) {
	if alerts.MaxLevelHold < 2*tracker.MaxLevelStepFrames {
		t.Errorf("alerts.MaxLevelHold %d < 2 × tracker.MaxLevelStepFrames (%d)", alerts.MaxLevelHold, 2*tracker.MaxLevelStepFrames)
	}
}
