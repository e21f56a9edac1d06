package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
)

// bench is an invented unit for the incident tests (invented data, as the
// realism suite's): three pieces of equipment (pump, dryer, fan) of four
// channels each; each piece's channels follow one latent load (loading
// 0.9, noise 0.44, so unit variance) with its own setpoint. Frames every
// 10 s.
type bench struct {
	rng   *rand.Rand
	level [3]float64      // setpoints of the latent loads, in σ
	bias  map[int]float64 // channel → bias in σ
	lines bytes.Buffer
	t     time.Time
}

var benchEquip = [3]string{"pump", "dryer", "fan"}

func newBench(seed uint64) *bench {
	return &bench{rng: rand.New(rand.NewPCG(seed, 11)), bias: map[int]float64{}, t: time.Date(2026, 5, 4, 0, 0, 0, 0, time.UTC)}
}

// benchChannel is the channel name of channel c (equipment c/4, field c%4).
func benchChannel(c int) string { return fmt.Sprintf("bench.%s.f%d", benchEquip[c/4], c%4) }

// run appends d of frames.
func (b *bench) run(d time.Duration) {
	for end := b.t.Add(d); b.t.Before(end); b.t = b.t.Add(10 * time.Second) {
		for e, name := range benchEquip {
			load := b.level[e] + b.rng.NormFloat64()
			fmt.Fprintf(&b.lines, "bench,eq=%s ", name)
			for f := 0; f < 4; f++ {
				c := 4*e + f
				v := 50 + 10*float64(f) + 2*(0.9*load+0.44*b.rng.NormFloat64()+b.bias[c])
				if f > 0 {
					b.lines.WriteByte(',')
				}
				fmt.Fprintf(&b.lines, "f%d=%.4f", f, v)
			}
			fmt.Fprintf(&b.lines, " %d\n", b.t.UnixNano())
		}
	}
}

// replayBench replays b's lines with the defaults (and alerts a) and
// returns the last revision of every model incident, oldest first.
func replayBench(t *testing.T, b *bench, a configs.Alerts) []*alerts.Record {
	t.Helper()
	cfg := &configs.Config{Alerts: a}
	cfg.ApplyDefaults()
	last := map[string]*alerts.Record{}
	pub := alerts.PublisherFunc(func(r *alerts.Record) {
		if r.Group == alerts.GroupModel {
			last[r.ID] = r
		}
	})
	if _, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(b.lines.Bytes()), Publisher: pub}); err != nil {
		t.Fatal(err)
	}
	var out []*alerts.Record
	for _, r := range last {
		out = append(out, r)
	}
	slices.SortFunc(out, func(x, y *alerts.Record) int { return x.Start.Compare(y.Start) })
	return out
}

func describe(rs []*alerts.Record) string {
	var sb strings.Builder
	for _, r := range rs {
		top := ""
		if len(r.Contributors) > 0 {
			top = r.Contributors[0].Expectation()
		}
		end := "open"
		if r.End != nil {
			end = r.End.Format("15:04") + " " + r.EndReason
		}
		fmt.Fprintf(&sb, "\n  %s–%s location %v; %s", r.Start.Format("Jan 2 15:04"), end, r.Location, top)
	}
	return sb.String()
}

// twoFaultBench runs the bench 2 days, then a bias of first σ on the
// pump's f1 for 2 h (from t1), then also one of second σ on the dryer's
// f2 for 2 h (from t2).
func twoFaultBench(seed uint64, first, second float64) (b *bench, t1, t2 time.Time) {
	b = newBench(seed)
	b.run(2 * 24 * time.Hour)
	t1 = b.t
	b.bias[1] = first
	b.run(2 * time.Hour)
	t2 = b.t
	b.bias[6] = second
	b.run(2 * time.Hour)
	return b, t1, t2
}

// pumpAndDryer returns the first incident from t1 holding the pump's f1
// and the first from t2 holding the dryer's f2 (nil: none).
func pumpAndDryer(rs []*alerts.Record, t1, t2 time.Time) (pump, dryer *alerts.Record) {
	for _, r := range rs {
		switch {
		case pump == nil && !r.Start.Before(t1) && slices.Contains(r.Location, benchChannel(1)):
			pump = r
		case dryer == nil && !r.Start.Before(t2) && slices.Contains(r.Location, benchChannel(6)):
			dryer = r
		}
	}
	return pump, dryer
}

// TestTwoFaultsOneUnit: a 4σ bias on the pump, then, while it persists, a
// 4σ bias on the dryer of the same unit: two incidents, each naming its
// own equipment's channel first and holding it in its location, the
// second as early after its fault as the first after its own.
func TestTwoFaultsOneUnit(t *testing.T) {
	b, t1, t2 := twoFaultBench(1, 4, 4)
	rs := replayBench(t, b, configs.Alerts{})
	t.Logf("incidents:%s", describe(rs))
	pump, dryer := pumpAndDryer(rs, t1, t2)
	if pump == nil || dryer == nil || pump == dryer {
		t.Fatalf("want one incident for the pump and another for the dryer")
	}
	if pump.Contributors[0].Channel != benchChannel(1) || dryer.Contributors[0].Channel != benchChannel(6) {
		t.Errorf("leading channels %s and %s", pump.Contributors[0].Channel, dryer.Contributors[0].Channel)
	}
	if slices.Contains(dryer.Location, benchChannel(1)) {
		t.Errorf("the dryer's incident holds the pump's channel: %v", dryer.Location)
	}
	d1, d2 := pump.Start.Sub(t1), dryer.Start.Sub(t2)
	t.Logf("delays: pump %v, dryer %v", d1, d2)
	if d2 > 10*time.Minute || d2 > d1+5*time.Minute {
		t.Errorf("the second fault took %v to be reported, the first %v", d2, d1)
	}
	if pump.End != nil && pump.EndReason == alerts.EndMerged {
		t.Errorf("the pump's incident merged into %s", pump.MergedInto)
	}
}

// TestSetpointStepAndRelationShift: with accept_after 2h, a setpoint step
// of the pump (all four channels move together with their load, the
// structure unchanged) raises nothing or an incident that ends as the
// new normal soon after the hold; a level shift of one pump channel
// against the others (a broken relation) raises an incident naming it.
func TestSetpointStepAndRelationShift(t *testing.T) {
	a := configs.Alerts{AcceptAfter: 2 * time.Hour}
	b := newBench(2)
	b.run(2 * 24 * time.Hour)
	t0 := b.t
	b.level[0] = 3
	b.run(6 * time.Hour)
	step := replayBench(t, b, a)
	t.Logf("setpoint step:%s", describe(step))
	for _, r := range step {
		if r.Start.Before(t0) {
			continue
		}
		if r.End == nil || r.End.Sub(r.Start) > 2*time.Hour+20*time.Minute {
			t.Errorf("setpoint step: incident %s still open or open longer than accept_after and 20 min (%v)", r.ID, r.End)
		} else if r.End.Sub(r.Start) > 2*time.Hour && r.EndReason != alerts.EndNewNormal {
			t.Errorf("setpoint step: incident %s ended %q after the hold", r.ID, r.EndReason)
		}
	}

	b = newBench(2)
	b.run(2 * 24 * time.Hour)
	t0 = b.t
	b.bias[2] = 4
	b.run(6 * time.Hour)
	shift := replayBench(t, b, a)
	t.Logf("relation shift:%s", describe(shift))
	found := false
	for _, r := range shift {
		if !r.Start.Before(t0) && r.Start.Sub(t0) < 30*time.Minute && r.Contributors[0].Channel == benchChannel(2) {
			found = true
		}
	}
	if !found {
		t.Error("relation shift: no incident naming the shifted channel first within 30 min")
	}
}

// TestLocationQuietKey: alerts.location_quiet reaches the alarm rules of
// the units, a unit's own value over the plant's, and none leaves the
// alarm engine's default.
func TestLocationQuietKey(t *testing.T) {
	c := &configs.Config{
		Alerts: configs.Alerts{LocationQuiet: 40 * time.Minute},
		Units:  []configs.Unit{{Name: "air"}, {Name: "boiler", Alerts: configs.Alerts{LocationQuiet: time.Hour}}},
	}
	ac := AlertsConfig(c)
	if q := ac.Rules.LocationQuiet; q != 40*time.Minute {
		t.Errorf("plant location quiet %v, want 40m", q)
	}
	if q := ac.Units["air"].LocationQuiet; q != 40*time.Minute {
		t.Errorf("air location quiet %v, want 40m", q)
	}
	if q := ac.Units["boiler"].LocationQuiet; q != time.Hour {
		t.Errorf("boiler location quiet %v, want 1h", q)
	}
	if q := AlertsConfig(&configs.Config{}).Rules.LocationQuiet; q != 0 {
		t.Errorf("unset location quiet %v, want 0 (alerts.DefaultLocationQuiet applies)", q)
	}
}

// TestRestartInsideRecentring: a setpoint step is accepted as the new
// normal after accept_after (2h here), and the accepted channels are
// recentred over the next recentreFrames frames. A checkpoint cut at the
// acceptance frame (the acceptance handed over, not yet taken up) and one
// cut 10 frames into the window restore to the uninterrupted run's scores
// and alert revisions bit for bit.
func TestRestartInsideRecentring(t *testing.T) {
	const period = 10 * time.Second
	b := newBench(2)
	b.run(2 * 24 * time.Hour)
	b.level[0] = 3
	b.run(3 * time.Hour)
	ch, frames := collectFrames(t, b.lines.Bytes(), period)
	cfg := &configs.Config{Alerts: configs.Alerts{AcceptAfter: 2 * time.Hour}}
	cfg.ApplyDefaults()
	var at time.Time
	restartMatches(t, cfg, ch, period, frames, len(frames)-10, func(r *alerts.Record) {
		if r.Accepted != nil && at.IsZero() {
			at = r.Accepted.At
		}
	})
	if at.IsZero() {
		t.Fatal("no incident was accepted as the new normal")
	}
	k := slices.IndexFunc(frames, func(f stream.Frame) bool { return f.Start.Equal(at) })
	if k < 0 {
		t.Fatalf("no frame at the acceptance %v", at)
	}
	for _, after := range []int{0, 10} {
		t.Run(fmt.Sprintf("cut %d frames after the acceptance", after), func(t *testing.T) {
			if n := restartMatches(t, cfg, ch, period, frames, k+1+after, nil); n == 0 {
				t.Error("no alert revision after the cut to compare")
			}
		})
	}
}
