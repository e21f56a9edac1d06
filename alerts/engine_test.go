package alerts

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"
)

// learnLog records the Learning callbacks.
type learnLog struct {
	mu    sync.Mutex
	calls []string
}

func (l *learnLog) Freeze(u string) {
	l.mu.Lock()
	l.calls = append(l.calls, "freeze "+u)
	l.mu.Unlock()
}
func (l *learnLog) Thaw(u string) { l.mu.Lock(); l.calls = append(l.calls, "thaw "+u); l.mu.Unlock() }

type harness struct {
	t      *testing.T
	e      *Engine
	recs   []*Record
	events []Event
	learn  *learnLog
}

// newHarness returns an engine whose every published record is validated
// against the schema and kept, and whose events are kept.
// Its learner is h.learn, which freezes and thaws.
func newHarness(t *testing.T, cfg Config) *harness {
	t.Helper()
	l := &learnLog{}
	h := learnHarness(t, cfg, l)
	h.learn = l
	return h
}

// snapshot returns the snapshot of h's engine.
func (h *harness) snapshot() []byte {
	h.t.Helper()
	var b bytes.Buffer
	if err := h.e.Snapshot(&b); err != nil {
		h.t.Fatal(err)
	}
	return b.Bytes()
}

// restore replaces the state of h's engine by snapshot b.
func (h *harness) restore(b []byte) {
	h.t.Helper()
	if err := h.e.Restore(bytes.NewReader(b)); err != nil {
		h.t.Fatal(err)
	}
}

// stepper returns a function that feeds o to e one second after the
// previous frame, failing t on an error.
func stepper(t *testing.T, e *Engine, o *Observation) func() {
	s := 0
	return func() {
		s++
		o.Time = sec(float64(s))
		if err := e.Observe(o); err != nil {
			t.Fatal(err)
		}
	}
}

// model feeds one frame of unit "u" at second at with T² ratio r (limit 10)
// and SPE, φ below their limits.
func (h *harness) model(at, r float64) {
	h.t.Helper()
	o := Observation{
		Unit: "u", Time: sec(at), ModelState: ModelAdapting,
		Stats: []Stat{{StatT2, 10 * r, 10}, {StatSPE, 1, 5}, {StatPhi, 1, 3}},
		Contributors: []Contributor{
			{Channel: "u.pump.flow", Share: 0.6, RBC: 6, Limit: 2, Modes: []int{0, 2}},
			{Channel: "u.pump.temp", Share: 0.3, RBC: 3, Limit: 2, Modes: []int{1}},
			{Channel: "u.pump.vib", Share: 0.1, RBC: 1, Limit: 2},
		},
		Missing: []string{"u.tank.level"},
	}
	if err := h.e.Observe(&o); err != nil {
		h.t.Fatalf("observe at %v: %v", at, err)
	}
}

// quality feeds one frame with the given quality conditions and no alarm.
func (h *harness) quality(at float64, q ...Quality) {
	h.t.Helper()
	o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting, Quality: q}
	if err := h.e.Observe(&o); err != nil {
		h.t.Fatalf("observe at %v: %v", at, err)
	}
}

func (h *harness) cmd(c Command) Reply {
	h.t.Helper()
	return h.e.Handle(context.Background(), c)
}

// kinds returns "kind@second" of the events of kind k (all if k == "").
func (h *harness) eventsOf(kinds ...string) []string {
	var out []string
	for _, ev := range h.events {
		if len(kinds) > 0 && !slices.Contains(kinds, ev.Kind) {
			continue
		}
		s := fmt.Sprintf("%s@%g", ev.Kind, ev.Time.Sub(t0).Seconds())
		if ev.Kind == EventState {
			s = fmt.Sprintf("%s %v→%v@%g", ev.Alarm, ev.From, ev.To, ev.Time.Sub(t0).Seconds())
		}
		out = append(out, s)
	}
	return out
}

func (h *harness) last() *Record {
	h.t.Helper()
	if len(h.recs) == 0 {
		h.t.Fatal("no record published")
	}
	return h.recs[len(h.recs)-1]
}

// lastOf returns the last record of the given kind.
func (h *harness) lastOf(kind string) *Record {
	h.t.Helper()
	for i := len(h.recs) - 1; i >= 0; i-- {
		if h.recs[i].Kind == kind {
			return h.recs[i]
		}
	}
	h.t.Fatalf("no %s record", kind)
	return nil
}

func equalStrings(t *testing.T, what string, got, want []string) {
	t.Helper()
	if !slices.Equal(got, want) {
		t.Errorf("%s:\n got %q\nwant %q", what, got, want)
	}
}

var fastRules = Rules{OnCount: 3, OnWindow: 5, OffDelay: 10 * time.Second, Deadband: 0.05}

// TestEngineLifecycle follows one incident through every state and checks
// each transition, its time, each record revision and the freeze/thaw
// callbacks.
func TestEngineLifecycle(t *testing.T) {
	h := newHarness(t, Config{Rules: fastRules})
	h.model(0, 0.5)
	h.model(1, 1.2) // confirming
	h.model(2, 1.1)
	h.model(3, 1.3) // 3 of the last 3 (window not full yet): active
	if len(h.recs) != 1 {
		t.Fatalf("%d records after activation, want 1", len(h.recs))
	}
	r := h.last()
	wantID := "u/model/20260302T080003Z"
	if r.ID != wantID || r.Revision != 1 || r.End != nil || r.State != "active" || !r.Start.Equal(sec(3)) {
		t.Errorf("first revision: id %q rev %d end %v state %q start %v", r.ID, r.Revision, r.End, r.State, r.Start)
	}
	if r.Severity != "low" || r.Peak.Statistic != StatT2 || r.Peak.Value != 13 || r.Peak.Limit != 10 {
		t.Errorf("peak %+v severity %q", r.Peak, r.Severity)
	}
	if len(r.Contributors) != 3 || r.Contributors[0].Channel != "u.pump.flow" || !slices.Equal(r.Contributors[0].Modes, []int{0, 2}) || r.Contributors[2].Modes == nil {
		t.Errorf("contributors %+v", r.Contributors)
	}
	if r.ModelState != ModelFrozen || !slices.Equal(r.Missing, []string{"u.tank.level"}) || r.Caution != Caution {
		t.Errorf("model state %q missing %v caution %q", r.ModelState, r.Missing, r.Caution)
	}
	h.model(4, 2.5) // severity medium (ratio ≥ 2): a new revision
	if r := h.last(); r.Revision != 2 || r.Severity != "medium" || r.Peak.Value != 25 || !r.Peak.Time.Equal(sec(4)) {
		t.Errorf("escalation: rev %d severity %q peak %+v", r.Revision, r.Severity, r.Peak)
	}
	h.model(5, 1.8) // lower peak: no revision
	h.model(6, 0.9) // below 1 − 0.05: clearing
	h.model(15, 0.9)
	if len(h.recs) != 2 {
		t.Fatalf("%d records while clearing, want 2", len(h.recs))
	}
	h.model(16, 0.9) // 10 s below: normal
	r = h.last()
	if r.Revision != 3 || r.End == nil || !r.End.Equal(sec(16)) || r.State != "normal" || r.EndReason != EndReturned {
		t.Errorf("close: rev %d end %v state %q reason %q", r.Revision, r.End, r.State, r.EndReason)
	}
	if r.ID != wantID || r.Statistics[0].State != "normal" || r.Statistics[0].Peak != 25 {
		t.Errorf("close: id %q stats %+v", r.ID, r.Statistics)
	}
	equalStrings(t, "events", h.eventsOf(), []string{
		"missing:u.tank.level normal→confirming@0", // missing, not yet for the 5-min hold
		"t2 normal→confirming@1", "t2 confirming→active@3", "open@3", "freeze@3",
		"t2 active→clearing@6", "t2 clearing→normal@16", "close@16", "thaw@16",
	})
	equalStrings(t, "learning", h.learn.calls, []string{"freeze u", "thaw u"})
	c := h.e.Counters(nil)
	if len(c) != 1 || c[0].Opened != 1 || c[0].Published != 3 || c[0].Open != 0 || c[0].Frames != 9 {
		t.Errorf("counters %+v", c)
	}
}

func TestNoFreeze(t *testing.T) {
	r := fastRules
	r.NoFreeze = true
	h := newHarness(t, Config{Rules: r})
	for i := 0; i < 5; i++ {
		h.model(float64(i), 2)
	}
	if len(h.learn.calls) != 0 || h.last().ModelState != ModelAdapting {
		t.Errorf("NoFreeze: calls %v, model state %q", h.learn.calls, h.last().ModelState)
	}
}

func TestAcknowledge(t *testing.T) {
	// Re-opening off: the alert at 3 s is to be a new one (reopen_test.go
	// covers re-opening).
	h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: -1, ReopenWithin: -1}})
	h.model(0, 2)
	id := h.last().ID
	rep := h.cmd(Command{Op: OpAck, AlertID: id, By: "jo", Comment: "seen"})
	if !rep.OK || rep.AlertID != id {
		t.Fatalf("ack: %+v", rep)
	}
	r := h.last()
	if r.Revision != 2 || r.Acknowledged == nil || r.Acknowledged.By != "jo" || r.Acknowledged.Comment != "seen" {
		t.Errorf("ack revision %+v", r)
	}
	if rep := h.cmd(Command{Op: OpAck, AlertID: id, By: "al"}); !rep.OK || !strings.Contains(rep.Message, "already") || len(h.recs) != 2 {
		t.Errorf("second ack: %+v, %d records", rep, len(h.recs))
	}
	if rep := h.cmd(Command{Op: OpAck, AlertID: "u/model/nope", By: "jo"}); rep.OK || !strings.Contains(rep.Error, "unknown alert") {
		t.Errorf("unknown id: %+v", rep)
	}
	// Return to normal unacknowledged (ISA-18.2): a closed alert can
	// still be acknowledged.
	h.model(1, 2.5)
	h.model(2, 0.1)
	h.model(3, 3) // a new incident
	id2 := h.last().ID
	h.model(4, 0.1)
	if rep := h.cmd(Command{Op: OpAck, AlertID: id2, By: "jo"}); !rep.OK {
		t.Fatalf("ack closed: %+v", rep)
	}
	if r := h.last(); r.ID != id2 || r.End == nil || r.Acknowledged == nil || r.Revision != 3 {
		t.Errorf("ack of closed alert: %+v", r)
	}
}

// TestShelve: a shelf publishes one revision that shows it, hides new
// incidents of the alarm group until it expires (frame time), never hides
// the end of an alert already published, and on expiry annunciates what
// is still active.
func TestShelve(t *testing.T) {
	// Re-opening off: the alert at 30 s is to be a new one.
	h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: 5 * time.Second, ReopenWithin: -1}, MaxShelve: time.Hour})
	h.model(0, 2)
	id := h.last().ID
	for _, bad := range []Command{
		{Op: OpShelve, AlertID: id, By: "jo", Reason: "r", For: Duration(2 * time.Hour)},
		{Op: OpShelve, AlertID: id, By: "jo", Reason: "r", Until: sec(-10)},
		{Op: OpShelve, AlertID: id, By: "jo", For: Duration(time.Minute)},
		{Op: OpShelve, AlertID: id, By: "jo", Reason: "r", For: Duration(time.Minute), Until: sec(100)},
	} {
		if rep := h.cmd(bad); rep.OK {
			t.Errorf("shelve %+v accepted", bad)
		}
	}
	if rep := h.cmd(Command{Op: OpShelve, AlertID: id, By: "jo", Reason: "instrument work", For: Duration(60 * time.Second)}); !rep.OK {
		t.Fatalf("shelve: %+v", rep)
	}
	r := h.last()
	if r.Revision != 2 || r.Shelved == nil || !r.Shelved.Until.Equal(sec(60)) || r.Shelved.Reason != "instrument work" {
		t.Fatalf("shelve revision: %+v", r.Shelved)
	}
	h.model(1, 5) // escalation while shelved: hidden
	h.model(2, 0.1)
	h.model(7, 0.1) // returns: the end of a published alert is shown
	if r := h.last(); r.ID != id || r.End == nil || r.Revision != 3 {
		t.Errorf("close while shelved: %+v", r)
	}
	n := len(h.recs)
	h.model(30, 3) // a new incident while shelved: hidden
	h.model(59, 3)
	if len(h.recs) != n {
		t.Fatalf("shelved incident published: %+v", h.last())
	}
	h.model(60, 3) // the shelf expires at 60 s: annunciated
	r = h.last()
	if len(h.recs) != n+1 || r.Start != sec(30) || r.Shelved != nil || r.Revision != 1 {
		t.Errorf("after expiry: %d records, last %+v", len(h.recs)-n, r)
	}
	equalStrings(t, "shelf events", h.eventsOf(EventShelve, EventUnshelve), []string{"shelve@0", "unshelve@60"})
	if c := h.e.Counters(nil)[0]; c.ShelvedSuppressed == 0 {
		t.Errorf("no shelved suppression counted: %+v", c)
	}
	// Unshelve by command.
	if rep := h.cmd(Command{Op: OpShelve, AlertID: r.ID, By: "jo", Reason: "x", Until: sec(600)}); !rep.OK {
		t.Fatal(rep)
	}
	if rep := h.cmd(Command{Op: OpUnshelve, AlertID: r.ID, By: "jo"}); !rep.OK || h.last().Shelved != nil {
		t.Errorf("unshelve: %+v %+v", rep, h.last().Shelved)
	}
}

// TestMaintenance: maintenance ends open alerts, suppresses new ones and
// freezes learning while it lasts.
func TestMaintenance(t *testing.T) {
	h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: time.Second}})
	h.model(0, 2)
	on, off := true, false
	if rep := h.cmd(Command{Op: OpMaintenance, Unit: "u", On: &on, By: "jo", Reason: "pump swap"}); !rep.OK {
		t.Fatal(rep)
	}
	r := h.last()
	if r.End == nil || r.EndReason != EndMaintenance || !r.End.Equal(sec(0)) {
		t.Errorf("maintenance close: %+v", r)
	}
	n := len(h.recs)
	for i := 1; i < 20; i++ {
		h.model(float64(i), 5)
	}
	if len(h.recs) != n {
		t.Errorf("records during maintenance")
	}
	if c := h.e.Counters(nil)[0]; !c.InMaint || !c.Frozen || c.MaintenanceFrames != 19 {
		t.Errorf("counters in maintenance: %+v", c)
	}
	if rep := h.cmd(Command{Op: OpMaintenance, Unit: "u", On: &on, By: "jo"}); !rep.OK || !strings.Contains(rep.Message, "already") {
		t.Errorf("repeat: %+v", rep)
	}
	if rep := h.cmd(Command{Op: OpMaintenance, Unit: "u", On: &off, By: "jo"}); !rep.OK {
		t.Fatal(rep)
	}
	h.model(20, 0.5)
	h.model(21, 2)
	if r := h.last(); r.Start != sec(21) || r.End != nil {
		t.Errorf("after maintenance: %+v", r)
	}
	equalStrings(t, "learning", h.learn.calls, []string{"freeze u", "thaw u", "freeze u"})
	equalStrings(t, "events", h.eventsOf(EventMaintenanceOn, EventMaintenanceOff, EventFreeze, EventThaw, EventClose), []string{
		"freeze@0", "maintenance_on@0", "close@0", "maintenance_off@19", "thaw@19", "freeze@21",
	})
}

// stuckAt opens one new alert per time: channel c<i> stuck for one frame at
// the i-th time (stuck alarms activate at once by default).
func stuckAt(h *harness, times []float64) {
	for i, at := range times {
		h.quality(at, Quality{Channel: fmt.Sprintf("u.c%d.x", i), Kind: QualityStuck})
	}
}

func every(start, step float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = start + float64(i)*step
	}
	return out
}

// TestFlood checks L1–L3: ISA-18.2's flood definition as quoted in public
// secondary text: a flood begins when more than
// 10 alarms fall in 10 minutes and ends when the count drops below 5.
func TestFlood(t *testing.T) {
	t.Run("L1 starts at the 11th", func(t *testing.T) {
		h := newHarness(t, Config{})
		times := every(0, 55, 11) // 0, 55, …, 550 s
		stuckAt(h, times[:10])
		if ev := h.eventsOf(EventFloodStart); len(ev) != 0 {
			t.Fatalf("flood after 10: %v", ev)
		}
		stuckAt(h, nil)
		h.quality(550, Quality{Channel: "u.c10.x", Kind: QualityStuck})
		equalStrings(t, "flood", h.eventsOf(EventFloodStart), []string{"flood_start@550"})
		r := h.lastOf(KindFlood)
		if r.Kind != KindFlood || r.Revision != 1 || r.MemberCount != 11 || len(r.Members) != 11 || r.Peak.Value != 11 || r.Peak.Limit != 10 {
			t.Fatalf("flood record: %+v", r)
		}
		if r.Members[0].ID != "u/stuck:u.c0.x/20260302T080000Z" || r.Members[10].ID != "u/stuck:u.c10.x/20260302T080910Z" {
			t.Errorf("members %v … %v", r.Members[0].ID, r.Members[10].ID)
		}
		// The 11th alert is grouped into the flood, not annunciated alone.
		for _, rec := range h.recs {
			if strings.Contains(rec.ID, "u.c10.x") {
				t.Errorf("flood member published on its own: %s", rec.ID)
			}
		}
	})
	t.Run("L2 ten in ten minutes is no flood", func(t *testing.T) {
		h := newHarness(t, Config{})
		stuckAt(h, every(0, 60, 10)) // 0 … 540 s
		for s := 541.0; s <= 700; s++ {
			h.quality(s)
		}
		if ev := h.eventsOf(EventFloodStart); len(ev) != 0 {
			t.Errorf("flood: %v", ev)
		}
		if c := h.e.Counters(nil)[0]; c.Opened != 10 || c.Floods != 0 {
			t.Errorf("counters %+v", c)
		}
	})
	t.Run("L3 ends when the count drops below 5", func(t *testing.T) {
		h := newHarness(t, Config{})
		stuckAt(h, every(0, 55, 11))
		// The 5th most recent alert (330 s) leaves the 10-min window at
		// 930 s: the trailing count is 5 at 929 s and 4 at 930 s.
		for s := 551.0; s <= 929; s++ {
			h.quality(s)
		}
		if ev := h.eventsOf(EventFloodEnd); len(ev) != 0 {
			t.Fatalf("flood ended early: %v", ev)
		}
		h.quality(930)
		equalStrings(t, "flood end", h.eventsOf(EventFloodEnd), []string{"flood_end@930"})
		r := h.lastOf(KindFlood)
		if r.Kind != KindFlood || r.End == nil || !r.End.Equal(sec(930)) || r.EndReason != EndFloodOver {
			t.Errorf("flood end record %+v", r)
		}
	})
	t.Run("L3 end instant between frames", func(t *testing.T) {
		h := newHarness(t, Config{})
		stuckAt(h, every(0, 55, 11))
		h.quality(900)
		h.quality(1000) // first frame after the instant: the end is still 930 s
		if r := h.lastOf(KindFlood); r.End == nil || !r.End.Equal(sec(930)) {
			t.Errorf("flood end %v", r.End)
		}
	})
	t.Run("members still open are annunciated at the end", func(t *testing.T) {
		h := newHarness(t, Config{})
		stuckAt(h, every(0, 55, 11))
		// A 12th alert at 600 s that stays in alarm through the flood.
		for s := 600.0; s <= 1000; s++ {
			h.quality(s, Quality{Channel: "u.late.x", Kind: QualityOutOfRange})
		}
		var late []*Record
		for _, r := range h.recs {
			if strings.Contains(r.ID, "u.late.x") {
				late = append(late, r)
			}
		}
		// out_of_range holds 60 s: active at 660 s, a member of the flood;
		// the trailing count then drops below 5 when 385 s leaves, at 985 s.
		if len(late) != 1 || late[0].Start != sec(660) || !late[0].Updated.Equal(sec(985)) {
			t.Fatalf("late member records: %d %+v", len(late), late)
		}
		equalStrings(t, "flood end", h.eventsOf(EventFloodEnd), []string{"flood_end@985"})
		if c := h.e.Counters(nil)[0]; c.FloodSuppressed == 0 || c.Floods != 1 {
			t.Errorf("counters %+v", c)
		}
	})
}

// chatter feeds frames each second from 0 to end with T² over its limit
// exactly at the activation seconds (N = M = 1, off-delay 0), re-opening
// off (every activation is a new alert until the episode starts).
func chatter(t *testing.T, acts []float64, end float64) *harness {
	h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: -1, ReopenWithin: -1}})
	for s := 0.0; s <= end; s++ {
		r := 0.5
		if slices.Contains(acts, s) {
			r = 2
		}
		h.model(s, r)
	}
	return h
}

// TestChattering is L4: "three or more times in a minute" is a starting
// criterion for a chattering alarm quoted in public secondary text.
func TestChattering(t *testing.T) {
	t.Run("0 20 40 chatters", func(t *testing.T) {
		h := chatter(t, []float64{0, 20, 40, 50}, 120)
		equalStrings(t, "chatter events", h.eventsOf(EventOpen, EventChatterStart, EventChatterEnd), []string{
			"open@0", "open@20", "open@40", "chatter_start@40", "chatter_end@110",
		})
		r := h.last()
		if r.Chattering == nil || r.Chattering.Activations != 4 || !r.Chattering.First.Equal(sec(0)) || !r.Chattering.Last.Equal(sec(50)) {
			t.Fatalf("chattering record %+v", r.Chattering)
		}
		if r.End == nil || !r.End.Equal(sec(110)) || r.EndReason != EndQuiet || !r.Start.Equal(sec(40)) {
			t.Errorf("chattering end %v reason %q", r.End, r.EndReason)
		}
		if c := h.e.Counters(nil)[0]; c.Chattering != 1 || c.ChatterSuppressed != 1 || c.Opened != 3 {
			t.Errorf("counters %+v", c)
		}
	})
	t.Run("0 20 70 does not", func(t *testing.T) {
		h := chatter(t, []float64{0, 20, 70}, 100)
		if ev := h.eventsOf(EventChatterStart); len(ev) != 0 {
			t.Errorf("chattering: %v", ev)
		}
		if c := h.e.Counters(nil)[0]; c.Opened != 3 {
			t.Errorf("opened %d, want 3", c.Opened)
		}
	})
}

// TestStale is L5: an alarm active continuously for more than 24 h is
// stale (ISA-18.2, as quoted in public secondary text).
func TestStale(t *testing.T) {
	h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1}})
	h.model(0, 2)
	h.model((23*time.Hour + 59*time.Minute).Seconds(), 2)
	h.model((24 * time.Hour).Seconds(), 2)
	if r := h.last(); r.StaleAlarm {
		t.Fatalf("stale at 24 h exactly")
	}
	h.model((24*time.Hour + time.Second).Seconds(), 2)
	// Revision 2 is the bounded hold's acceptance at 23 h 59 min (flat
	// from its opening), revision 3 the stale flag.
	if r := h.last(); !r.StaleAlarm || r.Revision != 3 {
		t.Errorf("not stale after 24 h 0 min 1 s: %+v", r)
	}
	equalStrings(t, "stale", h.eventsOf(EventStale), []string{"stale@86401"})
	if c := h.e.Counters(nil)[0]; c.Stale != 1 || c.StaleOpen != 1 {
		t.Errorf("stale counters %+v", c)
	}
}

// TestQualityMissing: a channel missing for the hold time (default 5 min)
// raises a quality alert naming it; it ends after the off-delay.
func TestQualityMissing(t *testing.T) {
	h := newHarness(t, Config{})
	o := Observation{Unit: "u", ModelState: ModelAdapting, Missing: []string{"u.tank.level"}}
	for s := 0.0; s <= 300; s += 10 {
		o.Time = sec(s)
		if err := h.e.Observe(&o); err != nil {
			t.Fatal(err)
		}
		if s < 300 && len(h.recs) != 0 {
			t.Fatalf("quality alert at %v s", s)
		}
	}
	r := h.last()
	if r.Group != GroupQuality || r.Quality == nil || r.Quality.Kind != QualityMissing || r.Quality.Channel != "u.tank.level" || !r.Start.Equal(sec(300)) {
		t.Fatalf("missing alert: %+v", r)
	}
	if len(h.learn.calls) != 0 {
		t.Errorf("quality alert froze learning: %v", h.learn.calls)
	}
	o.Missing = nil
	for s := 310.0; s <= 370; s += 10 {
		o.Time = sec(s)
		if err := h.e.Observe(&o); err != nil {
			t.Fatal(err)
		}
	}
	if r := h.last(); r.End == nil || !r.End.Equal(sec(370)) {
		t.Errorf("missing alert end %v", r.End)
	}
	if len(h.e.units["u"].quality) != 0 {
		t.Errorf("quality alarm kept after it went quiet")
	}
}

// TestRates checks the trailing hour and day counts of new alerts.
func TestRates(t *testing.T) {
	h := newHarness(t, Config{})
	stuckAt(h, []float64{0, 1800, 7200})
	c := h.e.Counters(nil)[0]
	if c.LastHour != 1 || c.LastDay != 3 || c.Opened != 3 {
		t.Errorf("at 2 h: hour %d day %d opened %d, want 1 3 3", c.LastHour, c.LastDay, c.Opened)
	}
	// Minute resolution: the trailing day is the current minute and the
	// 1439 before it.
	h.quality(7200 + 86400 - 60)
	c = h.e.Counters(nil)[0]
	if c.LastHour != 0 || c.LastDay != 1 {
		t.Errorf("23 h 59 min later: hour %d day %d, want 0 1", c.LastHour, c.LastDay)
	}
	h.quality(7200 + 86400)
	if c = h.e.Counters(nil)[0]; c.LastDay != 0 {
		t.Errorf("24 h later: day %d, want 0", c.LastDay)
	}
}

func TestObserveErrors(t *testing.T) {
	h := newHarness(t, Config{})
	h.model(10, 0.5)
	err := h.e.Observe(&Observation{Unit: "u", Time: sec(5)})
	if !errors.Is(err, ErrOutOfOrder) || !strings.Contains(err.Error(), `"u"`) {
		t.Errorf("out of order: %v", err)
	}
	if err := h.e.Observe(&Observation{Unit: "u", Time: sec(10)}); !errors.Is(err, ErrOutOfOrder) {
		t.Errorf("repeated frame time: %v", err)
	}
	err = h.e.Observe(&Observation{Unit: "u", Time: sec(11), Stats: []Stat{{"q", 1, 1}, {StatT2, 1, 10}}})
	if !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), `stats[0]: unknown statistic "q"`) {
		t.Errorf("unknown stat: %v", err)
	}
	err = h.e.Observe(&Observation{Unit: "u", Time: sec(12), Quality: []Quality{{Channel: "c", Kind: "wobbly"}}})
	if !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), `quality[0]`) {
		t.Errorf("unknown quality: %v", err)
	}
	if err := h.e.Observe(&Observation{Time: sec(13)}); !errors.Is(err, ErrInput) {
		t.Errorf("empty unit: %v", err)
	}
	h.e.Observe(&Observation{Unit: "u", Time: sec(14), Stats: []Stat{{StatT2, 1, 0}}})
	if err := h.e.Observe(&Observation{Unit: "u", Time: sec(15), ModelState: "learning"}); !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), `model state "learning"`) {
		t.Errorf("bad model state: %v", err)
	}
	if err := h.e.Observe(&Observation{Unit: "u", Time: sec(16), Missing: []string{""}}); !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), "missing[0]") {
		t.Errorf("empty missing channel: %v", err)
	}
	if c := h.e.Counters(nil)[0]; c.OutOfOrder != 2 || c.InvalidStats != 1 {
		t.Errorf("counters %+v", c)
	}
}

func TestConfigValidate(t *testing.T) {
	bad := Config{
		Rules:        Rules{OnCount: 4, OnWindow: 3, Deadband: 1.5, Severity: []SeverityBand{{"a", 2}, {"b", 1}}},
		Units:        map[string]Rules{"x": {OnCount: 1, OnWindow: 70}},
		Quality:      map[string]QualityRule{"odd": {Severity: "low"}},
		ChatterCount: 1,
	}
	err := bad.Validate()
	for _, want := range []string{"rules: on-delay 4 of 3", "deadband 1.5", `severity[1] "b"`, "units[x]", "quality[odd]", "chatter count 1"} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("missing %q in %v", want, err)
		}
	}
	if err := (Config{}).Validate(); err != nil {
		t.Errorf("defaults invalid: %v", err)
	}
}

// TestDefaultsL11: the defaults equal the figures cited beside them in
// config.go (ISA-18.2 and the design choices named there).
func TestDefaultsL11(t *testing.T) {
	c := Config{}.withDefaults()
	// ISA-18.2 flood as quoted in public secondary text: more than 10 in 10 min, ends < 5.
	if c.FloodCount != 10 || c.FloodWindow != 10*time.Minute || c.FloodEnd != 5 {
		t.Errorf("flood %d in %v end %d", c.FloodCount, c.FloodWindow, c.FloodEnd)
	}
	// Chattering: 3 in 1 min, a starting criterion [quoted in public secondary text].
	if c.ChatterCount != 3 || c.ChatterWindow != time.Minute {
		t.Errorf("chatter %d in %v", c.ChatterCount, c.ChatterWindow)
	}
	// Stale: 24 h [quoted in public secondary text].
	if c.StaleAfter != 24*time.Hour {
		t.Errorf("stale %v", c.StaleAfter)
	}
	// Deadband and delay by signal type: ISA-18.2-2009 §10, from memory
	// [from memory].
	want := map[string]SignalPoint{"flow": {5, 15 * time.Second}, "level": {5, time.Minute}, "pressure": {2, 15 * time.Second}, "temperature": {1, time.Minute}}
	for k, v := range want {
		if SignalStartingPoints[k] != v {
			t.Errorf("%s: %+v, want %+v", k, SignalStartingPoints[k], v)
		}
	}
	// The statistic deadband default is the flow/level 5 % [from memory] (design
	// transfer to the value/limit ratio).
	if c.Rules.Deadband != 0.05 || c.Rules.OnCount != 3 || c.Rules.OnWindow != 5 {
		t.Errorf("rules %+v", c.Rules)
	}
}

// TestObserveAllocs guards the per-frame path: no allocation while no
// alarm changes state (testing.AllocsPerRun).
func TestObserveAllocs(t *testing.T) {
	e, err := NewEngine(Config{}, PublisherFunc(func(*Record) {}), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	o := Observation{
		Unit: "u", ModelState: ModelAdapting,
		Stats:        []Stat{{StatT2, 5, 10}, {StatSPE, 1, 5}, {StatPhi, 1, 3}},
		Contributors: []Contributor{{Channel: "a", Share: 1, RBC: 1, Modes: []int{0}}},
		Missing:      []string{"u.b"}, // missing, but not yet for the hold time
		Quality:      []Quality{{Channel: "u.c", Kind: QualityStuck}},
	}
	step := stepper(t, e, &o)
	for i := 0; i < 10; i++ {
		step()
	}
	if a := testing.AllocsPerRun(200, step); a != 0 {
		t.Errorf("Observe: %v allocs per frame, want 0", a)
	}
	// In alarm, with the peak rising every frame: still none.
	for i := 0; i < 10; i++ {
		o.Stats[0].Value = 20 + float64(i)
		step()
	}
	if a := testing.AllocsPerRun(200, func() { o.Stats[0].Value += 0.001; step() }); a != 0 {
		t.Errorf("Observe in alarm: %v allocs per frame, want 0", a)
	}
}

// benchObserve measures one frame with nq channels flagged stuck every
// frame (their alarms active, in steady state).
func benchObserve(b *testing.B, nq int) {
	e, _ := NewEngine(Config{}, PublisherFunc(func(*Record) {}), nil, nil)
	o := Observation{Unit: "u", ModelState: ModelAdapting, Stats: []Stat{{StatT2, 5, 10}, {StatSPE, 1, 5}, {StatPhi, 1, 3}}}
	for i := 0; i < nq; i++ {
		o.Quality = append(o.Quality, Quality{Channel: fmt.Sprintf("u.c%d.x", i), Kind: QualityStuck})
	}
	o.Time = sec(0)
	e.Observe(&o)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 1; b.Loop(); i++ {
		o.Time = sec(float64(i))
		e.Observe(&o)
	}
}

func BenchmarkObserve(b *testing.B) {
	for _, nq := range []int{0, 10, 100} {
		b.Run(fmt.Sprintf("stuck=%d", nq), func(b *testing.B) { benchObserve(b, nq) })
	}
}

// TestConcurrentUse: frames, commands, counters and snapshots from several
// goroutines (run with -race).
func TestConcurrentUse(t *testing.T) {
	var mu sync.Mutex
	n := 0
	e, _ := NewEngine(Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: -1}},
		PublisherFunc(func(*Record) { mu.Lock(); n++; mu.Unlock() }), &learnLog{}, nil)
	var wg sync.WaitGroup
	for _, unit := range []string{"a", "b"} {
		wg.Go(func() {
			for s := 0; s < 2000; s++ {
				r := 0.5
				if s%7 == 0 {
					r = 3
				}
				e.Observe(&Observation{Unit: unit, Time: sec(float64(s)), ModelState: ModelAdapting, Stats: []Stat{{StatSPE, r, 1}}})
			}
		})
	}
	wg.Go(func() {
		on, off := true, false
		for i := 0; i < 200; i++ {
			for _, r := range e.Open(nil) {
				e.Handle(context.Background(), Command{Op: OpAck, AlertID: r.ID, By: "jo"})
			}
			e.Handle(context.Background(), Command{Op: OpMaintenance, Unit: "b", On: &on, By: "jo"})
			e.Counters(nil)
			e.Snapshot(io.Discard)
			e.Handle(context.Background(), Command{Op: OpMaintenance, Unit: "b", On: &off, By: "jo"})
		}
	})
	wg.Wait()
	if c := e.Counters(nil); len(c) != 2 || c[0].Frames != 2000 || c[1].Frames != 2000 {
		t.Errorf("counters %+v", c)
	}
	mu.Lock()
	defer mu.Unlock()
	if n == 0 {
		t.Error("nothing published")
	}
}

// TestContributorValuesSanitized: non-finite or slightly negative values
// from the tracker cannot break the record (JSON has no NaN; the schema
// wants share in [0, 1] and RBC ≥ 0).
func TestContributorValuesSanitized(t *testing.T) {
	h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1}})
	o := Observation{Unit: "u", Time: sec(0), ModelState: ModelAdapting, Stats: []Stat{{StatPhi, 5, 1}},
		Contributors: []Contributor{{Channel: "a", Share: math.NaN(), RBC: -1e-17, Limit: math.Inf(1)}, {Channel: "b", Share: 1 + 1e-15, RBC: 2}}}
	if err := h.e.Observe(&o); err != nil {
		t.Fatal(err)
	}
	c := h.last().Contributors
	if c[0].Share != 0 || c[0].RBC != 0 || c[0].RBCLimit != 0 || c[1].Share != 1 {
		t.Errorf("contributors %+v", c)
	}
}

// TestPerUnitHygiene: a unit's own flood and chatter figures override the
// engine-wide ones.
func TestPerUnitHygiene(t *testing.T) {
	h := newHarness(t, Config{Units: map[string]Rules{"u": {FloodCount: 4, FloodWindow: time.Minute}}})
	stuckAt(h, every(0, 10, 5)) // 5 new alerts within a minute: more than 4
	equalStrings(t, "flood", h.eventsOf(EventFloodStart), []string{"flood_start@40"})
	if r := h.lastOf(KindFlood); r.Peak.Limit != 4 || r.MemberCount != 5 {
		t.Errorf("flood record %+v", r)
	}
	if err := (Config{FloodEnd: 5, Units: map[string]Rules{"x": {FloodCount: 2}}}).Validate(); err == nil || !strings.Contains(err.Error(), "units[x]: flood count 2 with end 5") {
		t.Errorf("flood end above count+1 accepted: %v", err)
	}
}
