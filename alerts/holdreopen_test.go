package alerts

import (
	"math/rand/v2"
	"testing"
	"time"
)

// TestHoldReopenKeepsHold: a unit-wide disturbance (invented data, frames
// that name no place) holds its unit flat at 1.2 times the limit for two
// hours but dips under the limits once, from 30 to 50 min in; its re-alarm
// re-opens the same incident (reopen_within). The incident keeps its
// start, so its bounded hold runs from its last growth: it is accepted
// about one accept_after (1 h) after its opening, not one after the
// re-opening, and it ends by its start plus accept_after. Before, the
// re-opening restarted the hold (accepted at 1 h 50 min in).
func TestHoldReopenKeepsHold(t *testing.T) {
	const after = time.Hour
	h, _ := locHarness(t, Config{Rules: Rules{AcceptAfter: after}})
	rng := rand.New(rand.NewPCG(5, 8))
	h.wide(0, 1800, 1.2, rng)    // 30 min in alarm
	h.wide(1800, 3000, 0.2, rng) // 20 min under: the off-delay ends it
	h.wide(3000, 7200, 1.2, rng) // re-alarm: re-opened, then flat
	h.wide(7200, 7800, 0.2, rng) // the disturbance ends
	recs := h.byStart()
	if len(recs) != 1 {
		t.Fatalf("%d model incidents, want 1 (re-opened once): %v", len(recs), keys(h.modelRecords()))
	}
	r := recs[0]
	if r.Reopened != 1 {
		t.Fatalf("reopened %d times, want 1", r.Reopened)
	}
	if r.Accepted == nil {
		t.Fatalf("a flat incident was not accepted by the hold in 2 h (accept_after %v)", after)
	}
	// The hold runs from its opening (the location widening to the twelve
	// channels of the move does not restart it, spread_restarts_hold
	// false); it accepts twice the off-delay (10 min, the time its
	// statistics need to return once learned, no learner here) before
	// accept_after.
	lead := 2 * DefaultOffDelay
	if got := r.Accepted.At.Sub(r.Start); got < after-lead || got > after-lead+10*time.Minute {
		t.Errorf("accepted %v after its start, want accept_after (%v) less twice the off-delay (%v), plus at most 10 min", got, after, lead)
	}
	// Its statistics stay up (nothing learns here): it ends at the end of
	// its hold, its start plus accept_after, within its disturbance.
	if r.End == nil || r.EndReason != EndHoldElapsed || r.ModelState != ModelAccepted {
		t.Fatalf("end %v reason %q state %q, want ended at the end of its hold, accepted", r.End, r.EndReason, r.ModelState)
	}
	if due := r.Start.Add(after); r.End.After(due) {
		t.Errorf("closed at %v, after its start plus accept_after (%v)", r.End, due)
	}
}
