package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
)

// mpPlant writes frames [from, to) of an invented pressure-supply unit p at
// 10 s (behaviour test; invented data): a pressure setpoint sp, which the
// plant does not publish, steps between 4.4, 4.5 and 4.6 every 2 h in
// normal operation and is raised by move(k) on top; a demand swing D
// (daily and 2-hourly) drives the rest. The header pressure, three pumps'
// discharge pressure, flow and power follow sp and D through fixed
// relations; a reservoir level wanders on its own (first-order
// autoregressive, σ 1.5 %, τ 6 h), so it leads a mode of its own:
//
//	hp = sp + 0.3 D + ε,  dpᵢ = sp + 1.5 D + ε,  flowᵢ = 600 + 800 D − 40 (sp − 4.5) + ε,
//	powerᵢ = 150 + 120 D + 30 (sp − 4.5) + ε,  level = 70 + L + ε
//
// bias(k) is added to the level reading (a sensor bias).
func mpPlant(from, to int, move, bias func(k int) float64, seed uint64) []byte {
	rng := rand.New(rand.NewPCG(seed, 77))
	var b bytes.Buffer
	phi := math.Exp(-10.0 / (6 * 3600))
	lv := 0.0
	for k := from; k < to; k++ {
		sp, d := spDemand(k, move)
		n := func(s float64) float64 { return s * rng.NormFloat64() }
		lv = phi*lv + 1.5*math.Sqrt(1-phi*phi)*rng.NormFloat64()
		level := 70 + lv + n(0.3)
		if bias != nil {
			level += bias(k)
		}
		ts := sStart.Add(time.Duration(k) * sPeriod).UnixNano()
		fmt.Fprintf(&b, "p,asset=header pressure=%.3f,level=%.2f %d\n", sp+0.3*d+n(0.015), level, ts)
		for i := 1; i <= 3; i++ {
			fmt.Fprintf(&b, "p,asset=pump%d dp=%.3f,flow=%.1f,power=%.2f %d\n", i,
				sp+1.5*d+n(0.02), 600+800*d-40*(sp-4.5)+n(6), 150+120*d+30*(sp-4.5)+n(1), ts)
		}
	}
	return b.Bytes()
}

// mpConfig is the configuration of mpPlant's tests: the default model and
// alarm settings (statistics t2,spe,phi,res; the budget calibration), at
// 10 s frames, with extra YAML under alerts.
func mpConfig(t *testing.T, alertsYAML string) *configs.Config {
	t.Helper()
	y := "frames: {period: 10s}\n"
	if alertsYAML != "" {
		y += "alerts: {" + alertsYAML + "}\n"
	}
	cfg, err := configs.Parse("p.yaml", []byte(y))
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

// TestNewOperatingPoint: a planned move of a setpoint the plant does not
// publish, 4 times its normal steps, moves every channel of the unit along
// the relations it learned. In the trade's reading of the two statistics
// such a move shows in Hotelling's T² (a point further along the model's
// own directions) while SPE, which measures a break of the correlation
// structure, stays within its limit; a new event, such as a sensor fault,
// moves the point off the model plane (Kourti & MacGregor, Chemometr.
// Intell. Lab. Syst. 28, 1995; Qin, J. Chemometr. 17, 2003; from memory).
// A sensor bias on a channel that leads a mode of its own also shows in T²
// alone, but its excess sits on that one channel: reconstructing it
// removes most of the index (Alcalá & Qin 2009). So, with the default
// settings:
//
//   - the move raises no model alert and one informational record (a new
//     operating point) within its ramp, and the unit is quiet for the 6 h
//     after it (the point is learned);
//   - with alerts.new_point false the same move raises a model alert (the
//     test can fail);
//   - a bias on the reservoir level of about the same T² size raises a
//     model alert led by the level, and no new-operating-point record.
//
// Three seeds of the test day.
func TestNewOperatingPoint(t *testing.T) {
	const day = 8640
	const at = 3000 // frame of the test day at which the move (or the bias) starts
	move := func(k int) float64 {
		if k < day+at {
			return 0
		}
		return 0.4 * math.Min(1, float64(k-day-at)/90) // +0.4 bar over 15 min
	}
	type result struct {
		alerts, points int     // model alerts and new-point records from the start to 6 h after
		pointRatio     float64 // T² over its limit in the new-point record
		lead           string  // the first model alert's leading channel
		ratio          float64 // its peak statistic over its limit
	}
	run := func(t *testing.T, cfg *configs.Config, m *ModelFile, data []byte) result {
		t.Helper()
		var r result
		seen := map[string]bool{}
		_, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(data), Baseline: m,
			Publisher: alerts.PublisherFunc(func(rec *alerts.Record) {
				if seen[rec.ID] {
					return
				}
				seen[rec.ID] = true
				k := int(rec.Start.Sub(sStart)/sPeriod) - day
				if k < at || k >= at+6*360 {
					return
				}
				switch {
				case rec.Kind == alerts.KindNotice && rec.Group == alerts.GroupPoint:
					r.points++
					r.pointRatio = rec.Peak.Ratio
					t.Logf("new operating point at frame %d: %s", k, rec.Notice)
				case rec.Kind == alerts.KindIncident && rec.Group == alerts.GroupModel:
					r.alerts++
					if r.lead == "" && len(rec.Contributors) > 0 {
						r.lead, r.ratio = rec.Contributors[0].Channel, rec.Peak.Ratio
					}
					t.Logf("model alert %s at frame %d (%s %.2f × limit, led by %v)", rec.ID, k, rec.Peak.Statistic, rec.Peak.Ratio, r.lead)
				}
			})})
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	m := fitBytes(t, mpConfig(t, ""), mpPlant(0, day, nil, nil, 1))
	for _, seed := range []uint64{2, 3, 4} {
		t.Run(fmt.Sprint("seed ", seed), func(t *testing.T) {
			mv := run(t, mpConfig(t, ""), m, mpPlant(day, 2*day, move, nil, seed))
			if mv.alerts != 0 || mv.points != 1 {
				t.Errorf("the planned move raised %d model alerts and %d new-operating-point records in 6 h; want 0 and 1", mv.alerts, mv.points)
			}
			off := run(t, mpConfig(t, "new_point: false"), m, mpPlant(day, 2*day, move, nil, seed))
			if off.alerts == 0 || off.points != 0 {
				t.Errorf("with new_point false the move raised %d model alerts and %d records; want at least 1 and 0", off.alerts, off.points)
			}
			// A level bias of 4.5 % (3 σ of its normal wander): T² about
			// as far over its limit as at the move's record (1.0 to 2.4
			// times against 1.3 to 1.4 over the seeds).
			bias := func(k int) float64 {
				if k < day+at {
					return 0
				}
				return 4.5
			}
			bs := run(t, mpConfig(t, ""), m, mpPlant(day, 2*day, nil, bias, seed))
			if bs.alerts == 0 || bs.points != 0 || !strings.HasSuffix(bs.lead, ".level") {
				t.Errorf("the level bias raised %d model alerts (first led by %q) and %d new-point records; want an alert led by the level and none",
					bs.alerts, bs.lead, bs.points)
			}
			t.Logf("T² over its limit: move's record %.2f, bias alert's peak %.2f", mv.pointRatio, bs.ratio)
		})
	}
}

// TestRestartInsidePoint: a unit that learns from its first frame (no
// fitted model) meets mpPlant's planned move on its second day; the move
// is a new operating point, and the unit takes in every channel over the
// next recentreFrames frames. A checkpoint cut at the record's frame (the
// point handed over, not yet taken up) and one cut 10 frames into the
// window restore to the uninterrupted run's scores and alert revisions bit
// for bit (the checkpoint carries the alarm engine's point and the
// window's channels).
func TestRestartInsidePoint(t *testing.T) {
	const day = 8640
	move := func(k int) float64 {
		if k < day+3000 {
			return 0
		}
		return 0.4 * math.Min(1, float64(k-day-3000)/90)
	}
	ch, frames := collectFrames(t, mpPlant(0, day+4000, move, nil, 5), sPeriod)
	cfg := mpConfig(t, "")
	cfg.ApplyDefaults()
	var at time.Time
	restartMatches(t, cfg, ch, sPeriod, frames, len(frames)-10, func(r *alerts.Record) {
		if r.Kind == alerts.KindNotice && r.Group == alerts.GroupPoint && at.IsZero() {
			at = r.Start
		}
	})
	if at.IsZero() {
		t.Fatal("the move raised no new-operating-point record")
	}
	k := slices.IndexFunc(frames, func(f stream.Frame) bool { return f.Start.Equal(at) })
	if k < 0 {
		t.Fatalf("no frame at the record %v", at)
	}
	for _, after := range []int{0, 10} {
		t.Run(fmt.Sprintf("cut %d frames after the record", after), func(t *testing.T) {
			restartMatches(t, cfg, ch, sPeriod, frames, k+1+after, nil)
		})
	}
}
