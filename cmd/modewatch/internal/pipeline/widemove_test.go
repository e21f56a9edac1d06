package pipeline

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// wideBench is an invented heating network for the unit-wide move test
// (invented data, as the realism suite's): eight substations of three
// channels each (return temperature, flow, valve), all driven by one heat
// demand (a daily cycle and a slow walk) and each by its own use (a slow
// walk). Frames every minute.
type wideBench struct {
	rng    *rand.Rand
	demand float64 // walk part of the demand
	use    [8]float64
	step   float64 // added to the demand: a load change
	bias   float64 // added to substation 3's flow: a sensor fault
	lines  bytes.Buffer
	t      time.Time
}

func newWideBench(seed uint64) *wideBench {
	return &wideBench{rng: rand.New(rand.NewPCG(seed, 3)), t: time.Date(2026, 5, 4, 0, 0, 0, 0, time.UTC)}
}

func (b *wideBench) flowBias(s int) float64 {
	if s == 3 {
		return b.bias
	}
	return 0
}

func (b *wideBench) run(d time.Duration) {
	const a = 0.99 // AR(1) of the walks per minute: a time constant of 100 min
	for end := b.t.Add(d); b.t.Before(end); b.t = b.t.Add(time.Minute) {
		b.demand = a*b.demand + 0.03*math.Sqrt(1-a*a)*b.rng.NormFloat64()
		h := float64(b.t.Hour()) + float64(b.t.Minute())/60
		dm := 0.6 + 0.08*math.Cos(2*math.Pi*(h-7)/24) + b.demand + b.step
		for s := range b.use {
			b.use[s] = a*b.use[s] + 0.06*math.Sqrt(1-a*a)*b.rng.NormFloat64()
			u := b.use[s]
			fmt.Fprintf(&b.lines, "net,sub=s%d ret=%.2f,flow=%.2f,valve=%.2f %d\n", s,
				50-6*dm-4*u+0.2*b.rng.NormFloat64(), 12+12*dm+15*u+0.3*b.rng.NormFloat64()+b.flowBias(s),
				50+50*dm+60*u+0.4*b.rng.NormFloat64(), b.t.UnixNano())
		}
	}
}

// TestUnitWideMove: a load change takes the network's demand to a level
// the normal days never showed (+0.15 of design, as the realism suite's
// district heating on its day 10); every substation moves with it, the
// statistics hover around their limits and which substation ranks first
// is chance. With the defaults the move is one incident (or a few, not one
// per wander of the leading channel), and a 5 m³/h flow bias on one
// substation (about 4σ) starting while the move holds the unit in alarm is
// still reported on its own within 15 min, naming its channel first. With
// alerts.specific_share and reopen_within switched off (and the 12h
// bounded hold of that time) the same frames open a train of incidents
// (the behaviour before them; the log shows
// whether the bias was still reported on its own).
func TestUnitWideMove(t *testing.T) {
	type result struct {
		move  int            // incidents after the step, other than the fault's
		fault *alerts.Record // the incident naming the biased flow first
		all   []*alerts.Record
	}
	run := func(a configs.Alerts) result {
		b := newWideBench(1)
		b.run(4 * 24 * time.Hour)
		t0 := b.t
		b.step = 0.15
		b.run(10 * time.Hour)
		tf := b.t
		b.bias = 5
		b.run(4 * time.Hour)
		b.bias = 0
		b.run(10 * time.Hour)
		var res result
		for _, r := range replayBench(t, &bench{lines: b.lines}, a) {
			switch {
			case r.Start.Before(t0):
			case res.fault == nil && !r.Start.Before(tf) && r.Start.Sub(tf) <= 15*time.Minute && r.Contributors[0].Channel == "net.s3.flow":
				res.fault = r
				res.all = append(res.all, r)
			default:
				res.move++
				res.all = append(res.all, r)
			}
		}
		return res
	}
	def := run(configs.Alerts{})
	t.Logf("defaults: %d incidents of the move%s", def.move, describe(def.all))
	if def.move < 1 || def.move > 2 {
		t.Errorf("the move opened %d incidents, want one or two", def.move)
	}
	if def.fault == nil {
		t.Error("the flow bias was not reported on its own within 15 min")
	} else if def.fault.EndReason == alerts.EndMerged {
		t.Errorf("the flow bias's incident merged into %s", def.fault.MergedInto)
	}
	// The behaviour before the rules had the bounded hold of that time,
	// 12h: a shorter hold accepts and closes the train's incidents too
	// (at 4h the rules off open 2 incidents on this seed), which would
	// hide what the rules do.
	off := run(configs.Alerts{SpecificShare: 1e-9, ReopenWithin: time.Nanosecond, AcceptAfter: 12 * time.Hour})
	t.Logf("rules off: %d incidents of the move, the bias on its own: %v%s", off.move, off.fault != nil, describe(off.all))
	if off.move < def.move+3 {
		t.Errorf("with the rules off the move opened %d incidents, with them %d: the test does not see them work", off.move, def.move)
	}
}
