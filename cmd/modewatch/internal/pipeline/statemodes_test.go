package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// wRun is the swing machine's state at frame k: it runs (1) or stands by
// (0) in turns of 2 h at 10 s.
func wRun(k int) int { return (k / 720) % 2 }

// wPlant writes frames [from, to) of an invented raw-water intake r at
// 10 s (behaviour test): three duty pumps (flow, power) follow one large
// demand swing D, and each gives up some flow while the swing pump runs;
// the swing pump's speed, flow and power read exactly 0 at rest, with its
// running flag; four river readings follow two slow drivers of their own
// that no pump moves (temperature and conductivity W, turbidity and pH U):
//
//	duty_i.flow = 100 + 40 D − 8 run + ε,  duty_i.power = 50 + 20 D − 4 run + ε
//	river.temp = 12 + W + ε,  river.cond = 400 + 10 W + ε,  river.turb = 6 + U + ε,  river.ph = 7.6 − 0.05 U + ε
//
// with W and U first-order autoregressive (σ 1, τ 3 h) and small noise.
// warm(k) adds a slow warming to W (the test day runs warmer than the
// normal one), stuck(k) freezes river.temp at its last live value.
func wPlant(from, to int, warm func(k int) float64, stuck func(k int) bool, seed uint64) []byte {
	rng := rand.New(rand.NewPCG(seed, 31))
	var b bytes.Buffer
	phi := math.Exp(-10.0 / (3 * 3600))
	sd := math.Sqrt(1 - phi*phi)
	var w, u float64
	held := math.NaN()
	for k := from; k < to; k++ {
		w = phi*w + sd*rng.NormFloat64()
		u = phi*u + sd*rng.NormFloat64()
		run := wRun(k)
		d := math.Sin(2*math.Pi*float64(k)/8640) + 0.2*math.Sin(2*math.Pi*float64(k)/900)
		n := func(s float64) float64 { return s * rng.NormFloat64() }
		ts := sStart.Add(time.Duration(k) * sPeriod).UnixNano()
		fmt.Fprintf(&b, "r,asset=duty")
		for i := 1; i <= 3; i++ {
			sep := ","
			if i == 1 {
				sep = " "
			}
			fmt.Fprintf(&b, "%sflow%d=%.3f,power%d=%.3f", sep, i, 100+40*d-8*float64(run)+n(0.5), i, 50+20*d-4*float64(run)+n(0.3))
		}
		fmt.Fprintf(&b, " %d\n", ts)
		speed, flow, power := 0.0, 0.0, 0.0
		if run == 1 {
			speed, flow, power = 1480+n(2), 60+20*d+n(0.5), 30+8*d+n(0.3)
		}
		fmt.Fprintf(&b, "r,asset=swing running=%di,speed=%.1f,flow=%.2f,power=%.2f %d\n", run, speed, flow, power, ts)
		wt := w
		if warm != nil {
			wt += warm(k)
		}
		temp := 12 + wt + n(0.05)
		if stuck != nil && stuck(k) {
			if math.IsNaN(held) {
				held = temp
			}
			temp = held
		}
		fmt.Fprintf(&b, "r,asset=river temp=%.2f,cond=%.1f,turb=%.2f,ph=%.3f %d\n", temp, 400+10*wt+n(0.5), 6+u+n(0.1), 7.6-0.05*u+n(0.005), ts)
	}
	return b.Bytes()
}

// TestStateModesShared: a unit split by its swing pump's running flag
// (found by fit) keeps as many modes in its "stopped" state as in its
// "running" one (or all but one residual dimension), so the river
// readings, which the pump does not drive, stay in the modes of both
// states. Over a test day that runs warmer than the normal day (by up to
// 2.5 σ of the river's normal wander) no model alert starts while the pump
// stands by, and a river sensor frozen at a live value is still flagged
// stuck. With each state counting its own modes (ShareStateModes off) the
// stopped state keeps 3 modes, leaves river readings in its residual and
// the same day alerts there, led by the river (behaviour test; the
// water-works realism plant showed the same on its raw-water unit).
func TestStateModesShared(t *testing.T) {
	const day = 8640
	warm := func(k int) float64 { return 2.5 * float64(k-day) / day }
	stuck := func(k int) bool { return k >= day+5000 && k < day+5600 }
	run := func(share bool) (stopped, all int, stuckAlert bool, m *ModelFile) {
		t.Helper()
		old := ShareStateModes
		ShareStateModes = share
		defer func() { ShareStateModes = old }()
		cfg := sConfig(t, "")
		m = fitBytes(t, cfg, wPlant(0, day, nil, nil, 1))
		replayIncidents(t, cfg, m, wPlant(day, 2*day, warm, stuck, 2), func(r *alerts.Record) {
			if r.Quality != nil && r.Quality.Kind == alerts.QualityStuck && r.Quality.Channel == "r.river.temp" {
				stuckAlert = true
			}
			if r.Group != alerts.GroupModel {
				return
			}
			all++
			k := int(r.Start.Sub(sStart) / sPeriod)
			if wRun(k) == 0 {
				stopped++
				t.Logf("shared modes %v: alert %s while the pump stands by (%s, %v)", share, r.ID, r.Peak.Statistic, r.Location)
			}
		})
		return stopped, all, stuckAlert, m
	}
	n, all, st, m := run(true)
	sf := m.Units[0].States
	if sf == nil || sf.Channel != "r.swing.running" || len(sf.Models) != 2 {
		t.Fatalf("states %+v, want two by r.swing.running", sf)
	}
	t.Logf("shared: floor %d, modes per state %d, %d; %d model alerts, %d while stopped", sf.MinModes, len(sf.Models[0].Modes), len(sf.Models[1].Modes), all, n)
	if sf.MinModes == 0 {
		t.Error("no floor saved with states whose own counts differ")
	}
	for _, sm := range sf.Models {
		if len(sm.Modes) < sf.MinModes && sm.Limits.ResidualDims > 1 {
			t.Errorf("state %s: %d modes and %d residual dimensions under a floor of %d", sm.Label, len(sm.Modes), sm.Limits.ResidualDims, sf.MinModes)
		}
	}
	if n > 0 {
		t.Errorf("%d model alerts while the swing pump stands by, want 0", n)
	}
	if !st {
		t.Error("the river temperature frozen at a live value for 600 frames raised no stuck alert")
	}
	n0, all0, _, m0 := run(false)
	sf = m0.Units[0].States
	t.Logf("own counts: modes per state %d, %d; %d model alerts, %d while stopped", len(sf.Models[0].Modes), len(sf.Models[1].Modes), all0, n0)
	if sf.MinModes != 0 {
		t.Errorf("ShareStateModes off: floor %d saved", sf.MinModes)
	}
	if n0 == 0 {
		t.Error("with each state's own count the warm day raised no alert while the pump stands by either: the test shows nothing")
	}
	if all > all0 {
		t.Errorf("shared modes: %d model alerts, more than the %d with each state's own count", all, all0)
	}
}

// replayIncidents replays data from model m under cfg and calls fn with
// the first revision of every incident record.
func replayIncidents(t *testing.T, cfg *configs.Config, m *ModelFile, data []byte, fn func(r *alerts.Record)) {
	t.Helper()
	seen := map[string]bool{}
	_, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(data), Baseline: m,
		Publisher: alerts.PublisherFunc(func(r *alerts.Record) {
			if r.Kind == alerts.KindIncident && !seen[r.ID] {
				seen[r.ID] = true
				fn(r)
			}
		})})
	if err != nil {
		t.Fatal(err)
	}
}
