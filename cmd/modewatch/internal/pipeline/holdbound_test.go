package pipeline

import (
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// TestHoldBoundAtPeriods: a 4σ bias of one pump channel (invented bench
// data, behaviour test) that stays flat for 5 h, past accept_after (2 h),
// raises an incident that is accepted as the new normal and closed no
// later than its start plus accept_after, at 5 s and at 60 s frames: the
// hold accepts it the unit's relearn span (31 frames: 2 min 35 s at 5 s,
// 31 min at 60 s) and twice the off-delay (2 × 5 min) early, so that the
// widening has taken the state in and the off-delay has run by then. Before, it
// was accepted at its start plus accept_after and closed only after the
// widening and the off-delay (about 8 and 36 min later). Its record says
// so: model state accepted, end reason new_normal (or hold_elapsed where
// its statistics had not returned by the bound).
func TestHoldBoundAtPeriods(t *testing.T) {
	const after = 2 * time.Hour
	for _, tc := range []struct {
		step time.Duration
		warm time.Duration
	}{
		{5 * time.Second, 2 * 24 * time.Hour},
		{time.Minute, 5 * 24 * time.Hour},
	} {
		t.Run(tc.step.String(), func(t *testing.T) {
			b := newBench(7)
			b.runEvery(tc.warm, tc.step)
			t0 := b.t
			b.bias[1] = 4
			b.runEvery(5*time.Hour, tc.step)
			t1 := b.t
			b.bias[1] = 0
			b.runEvery(time.Hour, tc.step)
			rs := replayBench(t, b, configs.Alerts{AcceptAfter: after})
			t.Logf("incidents:%s", describe(rs))
			n := 0
			for _, r := range rs {
				if r.Start.Before(t0) || !r.Start.Before(t1) {
					continue
				}
				if !slices.Contains(r.Location, benchChannel(1)) {
					// Another incident during the bias: only the bound.
					if r.End == nil || r.End.After(r.Start.Add(after)) {
						t.Errorf("incident %s (start %v) closed at %v, after its start plus accept_after (%v)", r.ID, r.Start.Format("15:04:05"), r.End, after)
					}
					continue
				}
				n++
				if r.Accepted != nil {
					t.Logf("%s accepted at %v: %s", r.ID, r.Accepted.At.Format("15:04:05"), r.Accepted.Comment)
				}
				if r.Accepted == nil {
					t.Errorf("incident %s of the flat bias was not accepted", r.ID)
					continue
				}
				if r.End == nil || r.End.After(r.Start.Add(after)) {
					t.Errorf("incident %s (start %v) closed at %v, after its start plus accept_after (%v)", r.ID, r.Start.Format("15:04:05"), r.End, after)
				}
				if r.ModelState != alerts.ModelAccepted || (r.EndReason != alerts.EndNewNormal && r.EndReason != alerts.EndHoldElapsed) {
					t.Errorf("incident %s: model state %q, end reason %q; want accepted, new_normal or hold_elapsed", r.ID, r.ModelState, r.EndReason)
				}
			}
			if n == 0 {
				t.Fatal("the bias raised no incident")
			}
		})
	}
}
