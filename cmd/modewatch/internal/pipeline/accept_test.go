package pipeline

import (
	"math"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// runCycle appends d of bench frames whose latent loads follow a daily
// cycle of amplitude amp (in σ, over the setpoints base) with period per,
// as the demand of a plant does.
func (b *bench) runCycle(d time.Duration, base [3]float64, amp float64, per time.Duration) {
	for end := b.t.Add(d); b.t.Before(end); {
		ph := 2 * math.Pi * float64(b.t.UnixNano()%int64(per)) / float64(per)
		for e := range b.level {
			b.level[e] = base[e] + amp*math.Sin(ph)
		}
		b.run(10 * time.Second)
	}
}

// TestAcceptedIncidentCloses: on a unit whose loads follow a daily cycle
// (6 h here, 1.5σ), a setpoint step of the pump (3σ, the structure
// unchanged) is accepted after accept_after (2h) and its incident closes
// within 30 min of the acceptance (the widening window of recentreFrames
// frames, then the off-delay): the accepted state joins the normal
// experience. Moving the means instead (accept_weight < 0) takes the
// hour's level of the cycle as the normal, and the incident is still
// open long after (logged for comparison, not checked).
func TestAcceptedIncidentCloses(t *testing.T) {
	gen := func() (*bench, time.Time) {
		b := newBench(5)
		b.runCycle(2*24*time.Hour, [3]float64{}, 1.5, 6*time.Hour)
		t0 := b.t
		b.runCycle(8*time.Hour, [3]float64{3, 0, 0}, 1.5, 6*time.Hour)
		return b, t0
	}
	open := func(a configs.Alerts) (worst time.Duration, accepted int) {
		b, t0 := gen()
		rs := replayBench(t, b, a)
		t.Logf("accept_weight %v:%s", a.AcceptWeight, describe(rs))
		for _, r := range rs {
			if r.Start.Before(t0) || r.Accepted == nil {
				continue
			}
			accepted++
			end := b.t
			if r.End != nil {
				end = *r.End
			}
			worst = max(worst, end.Sub(r.Accepted.At))
		}
		return worst, accepted
	}
	w, n := open(configs.Alerts{AcceptAfter: 2 * time.Hour})
	if n == 0 {
		t.Fatal("the setpoint step raised no incident accepted as the new normal")
	}
	if w > 30*time.Minute {
		t.Errorf("an accepted incident stayed open %v after its acceptance, want at most 30m", w)
	}
	old, _ := open(configs.Alerts{AcceptAfter: 2 * time.Hour, AcceptWeight: -1})
	t.Logf("longest open after acceptance: widening %v, moving the means %v", w, old)
}

// TestReturnAfterAcceptance: a 4σ bias of one pump channel lasts 5 h, so
// its incident is accepted as the new normal after accept_after (2h)
// while the fault persists; when the fault ends the channel returns to
// its old normal, and that raises no new incident (the old operating
// point stays in the normal experience), where moving the means to the
// biased level turned the return into a new alert held for the whole
// bounded hold.
func TestReturnAfterAcceptance(t *testing.T) {
	b := newBench(6)
	b.run(2 * 24 * time.Hour)
	t0 := b.t
	b.bias[1] = 4
	b.run(5 * time.Hour)
	t1 := b.t
	b.bias[1] = 0
	b.run(4 * time.Hour)
	rs := replayBench(t, b, configs.Alerts{AcceptAfter: 2 * time.Hour})
	t.Logf("incidents:%s", describe(rs))
	accepted := false
	for _, r := range rs {
		if r.Start.Before(t0) {
			continue
		}
		if r.Start.Before(t1) && r.Accepted != nil && r.End != nil && r.End.Before(t1) && r.EndReason == alerts.EndNewNormal {
			accepted = true
		}
		if !r.Start.Before(t1) {
			t.Errorf("the return to the old normal at %v raised incident %s", t1.Format("15:04"), r.ID)
		}
	}
	if !accepted {
		t.Error("the bias was not accepted as the new normal and closed before it ended")
	}
}
