package alerts

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"testing"
)

// wideFrame feeds unit "u" at second at with φ ratio r and a unit-wide
// move (invented data): twelve channels of one kind ("u.subNN.ret"), all
// equally over their own limits, in an order that is chance (rng), each
// explaining 0.08 of the index, as the return temperatures of a heating
// network's substations do under a load the model has not seen.
func (h *harness) wideFrame(at, r float64, rng *rand.Rand) {
	h.t.Helper()
	o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting,
		Stats: []Stat{{StatT2, 1, 10}, {StatSPE, 1, 5}, {StatPhi, r, 1}}}
	if r > 1 {
		for _, k := range rng.Perm(12) {
			o.Contributors = append(o.Contributors, Contributor{Channel: fmt.Sprintf("u.sub%02d.ret", k), RBC: 3, Limit: 2, Share: 0.08})
		}
	}
	if err := h.e.Observe(&o); err != nil {
		h.t.Fatalf("observe at %v: %v", at, err)
	}
}

// wide feeds wideFrame every second of [from, to).
func (h *harness) wide(from, to, r float64, rng *rand.Rand) {
	for at := from; at < to; at++ {
		h.wideFrame(at, r, rng)
	}
}

// TestUnitWideMoveOneIncident: a unit-wide move whose leading channel
// wanders among twelve equal ones is one incident, not one per wander;
// when it re-alarms within reopen_within after returning, the same
// incident re-opens (the record counts it); after that time, a re-alarm
// is a new incident. With both rules off (the behaviour before them) the
// same frames open a train of incidents.
func TestUnitWideMoveOneIncident(t *testing.T) {
	run := func(r Rules) (*harness, []*Record) {
		h, _ := locHarness(t, Config{Rules: r})
		rng := rand.New(rand.NewPCG(12, 13))
		h.wide(0, 1800, 1.2, rng)      // 30 min in alarm
		h.wide(1800, 3000, 0.2, rng)   // 20 min back: the 5-min off-delay ends it
		h.wide(3000, 3600, 1.2, rng)   // re-alarm 15 min after the end
		h.wide(3600, 5400, 0.2, rng)   // returns
		h.wide(5400, 16200, 0.2, rng)  // 3 h quiet
		h.wide(16200, 16800, 1.2, rng) // re-alarm after reopen_within
		h.wide(16800, 17400, 0.2, rng) // returns
		return h, h.byStart()
	}
	h, recs := run(Rules{})
	if len(recs) != 2 {
		t.Fatalf("%d model incidents, want 2 (one re-opened, one after reopen_within): %v", len(recs), keys(h.modelRecords()))
	}
	first, later := recs[0], recs[1]
	if first.Reopened != 1 || first.LastReopened == nil || !first.LastReopened.Equal(sec(3002)) {
		t.Errorf("first incident: reopened %d at %v, want 1 at %v (the third of 3-of-5 frames)", first.Reopened, first.LastReopened, sec(3002))
	}
	if first.End == nil || first.EndReason != EndReturned || !first.Start.Equal(sec(2)) {
		t.Errorf("first incident: start %v end %v reason %q", first.Start, first.End, first.EndReason)
	}
	if !later.Start.Equal(sec(16202)) || later.Reopened != 0 {
		t.Errorf("later incident: start %v reopened %d, want a new one at %v", later.Start, later.Reopened, sec(16202))
	}
	equalStrings(t, "open and re-open events", h.eventsOf(EventOpen, EventReopen), []string{"open@2", "reopen@3002", "open@16202"})
	if c := h.e.Counters(nil)[0]; c.Opened != 2 {
		t.Errorf("opened %d new alerts, want 2", c.Opened)
	}
	if rep := h.cmd(Command{Op: OpAck, AlertID: first.ID, By: "jo"}); !rep.OK {
		t.Errorf("ack of the re-opened and closed incident: %+v", rep)
	}

	_, old := run(Rules{SpecificShare: 1e-9, ReopenWithin: -1})
	if len(old) < 5 {
		t.Errorf("without the rules %d incidents; the test would not see them work", len(old))
	}
}

// TestSpecificFaultDuringWideMove: while a unit-wide move holds the unit in
// alarm, a fault whose channel explains most of the index still opens its
// own incident after the on-delay, named by its channel; after both
// return, a re-alarm that names a place (the same channel) is a new
// incident, not a re-opening.
func TestSpecificFaultDuringWideMove(t *testing.T) {
	h, _ := locHarness(t, Config{})
	rng := rand.New(rand.NewPCG(5, 6))
	h.wide(0, 600, 1.2, rng)
	pump := func(at float64) {
		h.t.Helper()
		o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting,
			Stats: []Stat{{StatT2, 1, 10}, {StatSPE, 1, 5}, {StatPhi, 4, 1}},
			Contributors: []Contributor{
				{Channel: "u.pump.flow", RBC: 20, Limit: 2, Share: 0.6},
				{Channel: "u.sub03.ret", RBC: 3, Limit: 2, Share: 0.08},
				{Channel: "u.sub07.ret", RBC: 3, Limit: 2, Share: 0.08},
			}, Location: []string{"u.pump.flow", "u.pump.temp"}}
		if err := h.e.Observe(&o); err != nil {
			h.t.Fatal(err)
		}
	}
	for at := 600.0; at < 700; at++ {
		pump(at)
	}
	recs := h.byStart()
	if len(recs) != 2 {
		t.Fatalf("%d incidents, want the move's and the pump's", len(recs))
	}
	if p := recs[1]; !p.Start.Equal(sec(602)) || p.Contributors[0].Channel != "u.pump.flow" || !slices.Equal(p.Location, []string{"u.pump.flow", "u.pump.temp"}) {
		t.Errorf("pump incident: start %v, first %s, location %v", p.Start, p.Contributors[0].Channel, p.Location)
	}
	if slices.ContainsFunc(recs[0].Contributors, func(c RecordContributor) bool { return c.Channel == "u.pump.flow" }) {
		t.Errorf("the move's incident took the pump's frames: %+v", recs[0].Contributors)
	}
	h.wide(700, 1600, 0.2, rng)
	for at := 1600.0; at < 1700; at++ {
		pump(at)
	}
	recs = h.byStart()
	if len(recs) != 3 || !recs[2].Start.Equal(sec(1602)) {
		t.Fatalf("a re-alarm naming the pump re-opened an incident: %d incidents %v", len(recs), keys(h.modelRecords()))
	}
	for _, r := range recs[:2] {
		if r.Reopened != 0 {
			t.Errorf("%s re-opened", r.ID)
		}
	}
}

// TestReopenAfterRestore: the incidents that may re-open survive a
// snapshot and restore, so a restarted service re-opens the same record.
func TestReopenAfterRestore(t *testing.T) {
	h, _ := locHarness(t, Config{})
	rng := rand.New(rand.NewPCG(7, 8))
	h.wide(0, 600, 1.2, rng)
	h.wide(600, 1500, 0.2, rng)
	h2, _ := locHarness(t, Config{})
	h2.restore(h.snapshot())
	h2.wide(1500, 1600, 1.2, rng)
	recs := h2.byStart()
	if len(recs) != 1 || recs[0].ID != h.byStart()[0].ID || recs[0].Reopened != 1 {
		t.Fatalf("after restore: %d records %v, want the first re-opened", len(recs), keys(h2.modelRecords()))
	}
}

// TestReopenSettings: negative ReopenWithin and SpecificShare switch the
// rules off; a share above 1 is refused.
func TestReopenSettings(t *testing.T) {
	c := Config{Rules: Rules{ReopenWithin: -1, SpecificShare: -1}}.withDefaults()
	if c.Rules.ReopenWithin > 0 || c.Rules.SpecificShare != 0 {
		t.Errorf("off: %v %v", c.Rules.ReopenWithin, c.Rules.SpecificShare)
	}
	d := Config{}.withDefaults()
	if d.Rules.ReopenWithin != DefaultReopenWithin || d.Rules.SpecificShare != DefaultSpecificShare {
		t.Errorf("defaults: %v %v", d.Rules.ReopenWithin, d.Rules.SpecificShare)
	}
	if err := (Config{Rules: Rules{SpecificShare: 1.5}}).Validate(); err == nil {
		t.Error("specific share 1.5 accepted")
	}
}
