package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
)

// cPlant writes frames [from, to) of an invented plant at 10 s (behaviour
// test): unit up holds a header pressure hp (5.5 ± 0.25, slow swing) and
// two readings that follow it; unit dn is driven by hp and by a load L of
// its own:
//
//	dn.f1 = 2 (hp − 5.5) + L,  dn.f2 = 1.5 (hp − 5.5) − L,  dn.t3 = L
//
// plus noise σ 0.1. step(k) raises hp's setpoint to 7 (a planned change
// upstream: 8 σ of its normal swing), bias(k) adds 0.6 (3 σ of the noise
// of f1 − t3 … about 4 σ of t3's conditional spread) to dn.t3.
func cPlant(from, to int, step, bias func(k int) bool, seed uint64) []byte {
	rng := rand.New(rand.NewPCG(seed, 13))
	var b bytes.Buffer
	for k := from; k < to; k++ {
		hp := 5.5 + 0.25*math.Sin(2*math.Pi*float64(k)/1440) + 0.05*rng.NormFloat64()
		if step != nil && step(k) {
			hp += 1.5
		}
		L := math.Sin(2*math.Pi*float64(k)/500) + 0.3*rng.NormFloat64()
		n := func() float64 { return 0.1 * rng.NormFloat64() }
		t3 := L + n()
		if bias != nil && bias(k) {
			t3 += 0.6
		}
		ts := sStart.Add(time.Duration(k) * sPeriod).UnixNano()
		fmt.Fprintf(&b, "up,asset=a hp=%.4f,b=%.4f,c=%.4f %d\n", hp, 3*hp+n(), -hp+n(), ts)
		fmt.Fprintf(&b, "dn,asset=a f1=%.4f,f2=%.4f,t3=%.4f %d\n", 2*(hp-5.5)+L+n(), 1.5*(hp-5.5)-L+n(), t3, ts)
	}
	return b.Bytes()
}

// TestContextDriver: with up.a.hp as a context channel of dn, a planned
// setpoint step upstream that moves dn far outside its normal range
// raises no alert in dn, while a bias on dn's own t3 is still detected
// and hp is never named as a contributor; without the context channel
// the same step raises an alert in dn.
func TestContextDriver(t *testing.T) {
	const day = 8640
	step := func(k int) bool { return k >= day+1000 && k < day+2500 }
	bias := func(k int) bool { return k >= day+4000 && k < day+4400 }
	run := func(yaml, replayYAML string) (stepAlerts, biasAlerts int, blamed bool) {
		cfg := sConfig(t, yaml)
		rcfg := sConfig(t, replayYAML+yaml)
		res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"},
			Stdin: bytes.NewReader(cPlant(0, day, nil, nil, 1)), Fit: true})
		if err != nil {
			t.Fatal(err)
		}
		m, err := res.Pipeline.Baseline()
		if err != nil {
			t.Fatal(err)
		}
		seen := map[string]bool{}
		_, err = Replay(context.Background(), ReplayOptions{Config: rcfg, Inputs: []string{"-"},
			Stdin: bytes.NewReader(cPlant(day, 2*day, step, bias, 2)), Baseline: m,
			Publisher: alerts.PublisherFunc(func(r *alerts.Record) {
				if r.Unit != "dn" || r.Kind != alerts.KindIncident || r.Group != alerts.GroupModel {
					return
				}
				blamed = blamed || slices.ContainsFunc(r.Contributors, func(c alerts.RecordContributor) bool { return c.Channel == "up.a.hp" })
				if seen[r.ID] {
					return
				}
				seen[r.ID] = true
				k := int(r.Start.Sub(sStart) / sPeriod)
				switch {
				case step(k) || step(k-30):
					stepAlerts++
				case bias(k):
					biasAlerts++
				default:
					t.Logf("%s: alert at frame %d outside both episodes", yaml, k-day)
				}
			})})
		if err != nil {
			t.Fatal(err)
		}
		return
	}
	s, b, blamed := run("units: [{name: dn, context: [up.a.hp]}]\n", "")
	t.Logf("with context: %d alerts in the step, %d in the bias", s, b)
	if s > 0 {
		t.Errorf("with hp as context, the upstream step raised %d alerts in dn", s)
	}
	if b == 0 {
		t.Error("with hp as context, the bias on dn's own t3 was missed")
	}
	if blamed {
		t.Error("the context channel up.a.hp was named as a contributor of dn's alert")
	}
	s, _, _ = run("", "")
	t.Logf("without context: %d alerts in the step", s)
	if s == 0 {
		t.Error("without hp as context the upstream step raised no alert in dn: the test shows nothing")
	}
}

// TestContextSuggested: fit suggests a channel of another unit that
// explains a large share of a unit's variance, with that share: dn.a and
// dn.b follow up.hp with noise σ 0.3 (corr² = 1/1.09 each by hand), dn.c
// is independent, so up.hp explains (2/1.09 + 0)/3 = 0.612 of dn.
func TestContextSuggested(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	var b bytes.Buffer
	for k := 0; k < 5000; k++ {
		hp := rng.NormFloat64()
		ts := sStart.Add(time.Duration(k) * sPeriod).UnixNano()
		fmt.Fprintf(&b, "up,asset=x hp=%.5f %d\n", hp, ts)
		fmt.Fprintf(&b, "dn,asset=x a=%.5f,b=%.5f,c=%.5f %d\n", hp+0.3*rng.NormFloat64(), -hp+0.3*rng.NormFloat64(), rng.NormFloat64(), ts)
	}
	res, err := Replay(context.Background(), ReplayOptions{Config: sConfig(t, ""), Inputs: []string{"-"}, Stdin: &b, Fit: true})
	if err != nil {
		t.Fatal(err)
	}
	m, err := res.Pipeline.Baseline()
	if err != nil {
		t.Fatal(err)
	}
	for _, u := range m.Units {
		if u.Name != "dn" {
			continue
		}
		if len(u.Suggested) != 1 || u.Suggested[0].Channel != "up.x.hp" || u.Suggested[0].Unit != "up" {
			t.Fatalf("dn: suggested %+v, want up.x.hp", u.Suggested)
		}
		if s := u.Suggested[0].Share; math.Abs(s-2/1.09/3) > 0.03 {
			t.Errorf("up.x.hp explains %.3f of dn's variance, by hand 0.612", s)
		}
		return
	}
	t.Fatal("no unit dn")
}
