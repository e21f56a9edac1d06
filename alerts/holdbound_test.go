package alerts

import (
	"bytes"
	"encoding/json"
	"slices"
	"testing"
	"time"
)

// holdBoundScript feeds unit u of h from at (seconds) to end: φ at 3 times
// its limit led by u.a (a flat disturbance in one piece of equipment, with
// nothing that learns it away, invented data) until 1200 s, then u.b
// leads at 3 as well (a second fault elsewhere, its own location) until
// 1400 s, then everything returns until 2100 s, then u.a leads again
// (a later change in the accepted channels, after the unit returned).
func holdBoundScript(h *harness, from, end float64) {
	for at := from; at < end; at++ {
		switch {
		case at < 1200:
			h.frame(at, 3, []string{"u.a"}, "u.a")
		case at < 1400:
			h.frame(at, 3, []string{"u.b", "u.a"}, "u.b")
		case at < 2100:
			h.frame(at, 0.1, nil)
		default:
			h.frame(at, 3, []string{"u.a"}, "u.a")
		}
	}
}

// TestHoldBound: a flat incident is accepted accept_after (10 min) less the
// time its statistics need to return (twice the off-delay with no
// learner, capped at half of accept_after: 5 min) after its opening and, its statistics still over the limits,
// ends at its start plus accept_after with end reason hold_elapsed, model
// state accepted, its channel out of the mask. The unit stays in alarm:
// frames still led by the accepted channel open no new incident, a second
// fault led by another channel opens its own after the on-delay (3 of 5
// frames, as on a quiet unit), located at its own channel. Once the unit
// returns, a change in the accepted channel is a new incident. A snapshot
// taken while the channel is covered restores to the same records.
func TestHoldBound(t *testing.T) {
	const after = 10 * time.Minute
	cfg := Config{Rules: Rules{AcceptAfter: after}}
	h, ml := locHarness(t, cfg)
	holdBoundScript(h, 0, 2200)
	recs := h.byStart()
	if len(recs) != 3 {
		t.Fatalf("%d model incidents, want 3 (the flat one, the second fault, the later change): %v", len(recs), keys(h.modelRecords()))
	}
	flat, second, later := recs[0], recs[1], recs[2]
	if flat.Accepted == nil || flat.Accepted.By != holdBy {
		t.Fatalf("flat incident not accepted by the hold: %+v", flat.Accepted)
	}
	if got, want := flat.Accepted.At.Sub(flat.Start), after/2; got < want || got > want+2*time.Second {
		t.Errorf("accepted %v after its start, want %v (half of accept_after)", got, want)
	}
	if flat.End == nil || !flat.End.Equal(flat.Start.Add(after)) || flat.EndReason != EndHoldElapsed || flat.ModelState != ModelAccepted {
		t.Errorf("flat incident: end %v reason %q state %q, want ended at its start plus accept_after (%v), hold_elapsed, accepted",
			flat.End, flat.EndReason, flat.ModelState, flat.Start.Add(after))
	}
	if want := sec(1202); !second.Start.Equal(want) || !slices.Equal(second.Location, []string{"u.b"}) {
		t.Errorf("second fault: start %v location %v, want %v and [u.b]", second.Start, second.Location, want)
	}
	if second.End == nil || second.EndReason != EndReturned {
		t.Errorf("second fault: end %v reason %q, want returned", second.End, second.EndReason)
	}
	if want := sec(2102); !later.Start.Equal(want) || !slices.Equal(later.Location, []string{"u.a"}) {
		t.Errorf("later change: start %v location %v, want %v and [u.a]", later.Start, later.Location, want)
	}
	if m := ml.masks["u"]; !slices.Equal(m, []string{"u.a"}) {
		t.Errorf("mask %v, want the later change's [u.a]", m)
	}

	// The same frames with a snapshot and restore while u.a is covered.
	h1, _ := locHarness(t, cfg)
	holdBoundScript(h1, 0, 900)
	var buf bytes.Buffer
	if err := h1.e.Snapshot(&buf); err != nil {
		t.Fatal(err)
	}
	var snap struct {
		Units []struct {
			Cover *snapCover `json:"hold_cover"`
		} `json:"units"`
	}
	if err := json.Unmarshal(buf.Bytes(), &snap); err != nil || len(snap.Units) != 1 || snap.Units[0].Cover == nil ||
		!slices.Equal(snap.Units[0].Cover.Channels, []string{"u.a"}) {
		t.Fatalf("snapshot's hold cover %+v (%v), want [u.a]", snap, err)
	}
	h2, _ := locHarness(t, cfg)
	if err := h2.e.Restore(&buf); err != nil {
		t.Fatal(err)
	}
	holdBoundScript(h2, 900, 2200)
	var want []*Record
	for _, r := range h.recs {
		if r.Updated.After(sec(899)) {
			want = append(want, r)
		}
	}
	if len(h2.recs) != len(want) {
		t.Fatalf("after the restore %d records, uninterrupted %d", len(h2.recs), len(want))
	}
	for i := range want {
		a, _ := json.Marshal(h2.recs[i])
		b, _ := json.Marshal(want[i])
		if !bytes.Equal(a, b) {
			t.Errorf("record %d after the restore:\n%s\nuninterrupted:\n%s", i, a, b)
		}
	}
}

// TestHoldBoundUncovers: after a flat incident ended at the end of its
// hold with the unit still in alarm, frames its accepted channel leads
// open no new incident while the level stays flat, but a growth by half
// of the level (a later change in that channel) uncovers it: a new
// incident opens on it.
func TestHoldBoundUncovers(t *testing.T) {
	h, _ := locHarness(t, Config{Rules: Rules{AcceptAfter: 10 * time.Minute}})
	at := 0.0
	for ; at < 900; at++ {
		h.frame(at, 3, []string{"u.a"}, "u.a")
	}
	if n := len(h.modelRecords()); n != 1 {
		t.Fatalf("%d incidents at 900 s, want the one ended at its hold", n)
	}
	for ; at < 1200; at++ {
		h.frame(at, 4.5, []string{"u.a"}, "u.a")
	}
	recs := h.byStart()
	if len(recs) != 2 || recs[1].End != nil || !slices.Equal(recs[1].Location, []string{"u.a"}) {
		t.Fatalf("after the growth: %d incidents, want a second one open on u.a: %v", len(recs), keys(h.modelRecords()))
	}
}
