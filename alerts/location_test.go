package alerts

import (
	"bytes"
	"encoding/json"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"
)

// maskLog is a Learning that also masks, recording every mask.
type maskLog struct {
	learnLog
	mu    sync.Mutex
	masks map[string][]string
}

func (m *maskLog) Mask(unit string, ch []string) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.masks == nil {
		m.masks = map[string][]string{}
	}
	m.masks[unit] = slices.Clone(ch)
}

// locHarness is a harness whose engine masks instead of freezing.
func locHarness(t *testing.T, cfg Config) (*harness, *maskLog) {
	t.Helper()
	ml := &maskLog{}
	return learnHarness(t, cfg, ml), ml
}

// learnHarness is a harness whose engine uses the Learning learn (h.learn
// is nil: the calls go to learn).
func learnHarness(t *testing.T, cfg Config, learn Learning) *harness {
	t.Helper()
	h := &harness{t: t}
	cfg.OnEvent = func(ev Event) { h.events = append(h.events, ev) }
	e, err := NewEngine(cfg, PublisherFunc(func(r *Record) {
		validateRecord(t, r)
		h.recs = append(h.recs, r)
	}), learn, nil)
	if err != nil {
		t.Fatal(err)
	}
	e.SetClock(func() time.Time { return time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC) })
	h.e = e
	return h
}

// frame feeds unit "u" at second at with φ ratio r and the given channels
// over their own limits (in rank order), the first explaining half the
// index as a single fault's channel does; loc is the frame's location.
func (h *harness) frame(at, r float64, over []string, loc ...string) {
	h.t.Helper()
	o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting,
		Stats: []Stat{{StatT2, 1, 10}, {StatSPE, 1, 5}, {StatPhi, r, 1}}, Location: loc}
	for i, c := range over {
		o.Contributors = append(o.Contributors, Contributor{Channel: c, RBC: float64(10 - i), Limit: 2, Share: float64(10-i) / 20})
	}
	o.Contributors = append(o.Contributors, Contributor{Channel: "u.quiet", RBC: 0.5, Limit: 2})
	if err := h.e.Observe(&o); err != nil {
		h.t.Fatalf("observe at %v: %v", at, err)
	}
}

// openModel returns the latest revision of every model incident, by id.
func (h *harness) modelRecords() map[string]*Record {
	out := map[string]*Record{}
	for _, r := range h.recs {
		if r.Group == GroupModel {
			out[r.ID] = r
		}
	}
	return out
}

// TestTwoLocations: a second fault in other equipment of a unit already in
// alarm opens its own incident after the unit's on-delay (3 of 5 frames),
// naming its own channels; each incident's contributors come from its own
// frames; the mask holds both locations; both end when the unit returns.
func TestTwoLocations(t *testing.T) {
	h, ml := locHarness(t, Config{})
	pump := []string{"u.pump.flow", "u.pump.temp"}
	dryer := []string{"u.dryer.temp"}
	at := 0.0
	for ; at < 60; at++ {
		h.frame(at, 3, []string{"u.pump.flow"}, pump...)
	}
	recs := h.modelRecords()
	if len(recs) != 1 {
		t.Fatalf("%d model incidents after the first fault, want 1", len(recs))
	}
	// Second fault: the dryer leads now, while the pump stays over its limit.
	for ; at < 120; at++ {
		h.frame(at, 6, []string{"u.dryer.temp", "u.pump.flow"}, append([]string{"u.dryer.temp", "u.dryer.fan"}, pump...)...)
	}
	recs = h.modelRecords()
	if len(recs) != 2 {
		t.Fatalf("%d model incidents after the second fault, want 2: %v", len(recs), keys(recs))
	}
	first, second := h.byStart()[0], h.byStart()[1]
	if want := sec(62); !second.Start.Equal(want) {
		t.Errorf("second incident starts %v, want %v (the third of 3-of-5 frames)", second.Start, want)
	}
	if !slices.Equal(first.Location, []string{"u.pump.flow", "u.pump.temp"}) {
		t.Errorf("first location %v", first.Location)
	}
	if !slices.Equal(second.Location, []string{"u.dryer.fan", "u.dryer.temp"}) {
		t.Errorf("second location %v (the pump's channels belong to the first)", second.Location)
	}
	if second.Contributors[0].Channel != "u.dryer.temp" || first.Contributors[0].Channel != "u.pump.flow" {
		t.Errorf("leading contributors %s / %s", first.Contributors[0].Channel, second.Contributors[0].Channel)
	}
	if first.ModelState != ModelReconstructing || second.ModelState != ModelReconstructing {
		t.Errorf("model states %s, %s", first.ModelState, second.ModelState)
	}
	if got := ml.masks["u"]; !slices.Equal(got, []string{"u.dryer.fan", "u.dryer.temp", "u.pump.flow", "u.pump.temp"}) {
		t.Errorf("mask %v", got)
	}
	if len(ml.calls) > 0 {
		t.Errorf("learning frozen: %v", ml.calls)
	}
	_ = dryer
	// Return to normal: both end, the mask empties.
	for ; at < 500; at++ {
		h.frame(at, 0.2, nil)
	}
	for id, r := range h.modelRecords() {
		if r.End == nil || r.EndReason != EndReturned {
			t.Errorf("%s: end %v, reason %q", id, r.End, r.EndReason)
		}
	}
	if got := ml.masks["u"]; len(got) != 0 {
		t.Errorf("mask after the end %v", got)
	}
}

// TestLocationsMerge: a fault that spreads into the channels of another
// open incident merges the later incident into the earlier one.
func TestLocationsMerge(t *testing.T) {
	h, _ := locHarness(t, Config{})
	at := 0.0
	for ; at < 30; at++ {
		h.frame(at, 3, []string{"u.a"}, "u.a", "u.b")
	}
	for ; at < 60; at++ {
		h.frame(at, 3, []string{"u.c", "u.a"}, "u.c", "u.d")
	}
	if n := len(h.modelRecords()); n != 2 {
		t.Fatalf("%d incidents, want 2", n)
	}
	// The second fault spreads to u.e, whose mode holds u.b of the first:
	// after growFrames frames led by u.e too, the second location grows
	// into the first's. A single frame does not grow it.
	h.frame(at, 3, []string{"u.c", "u.e"}, "u.c", "u.d", "u.e", "u.b")
	at++
	if n := len(h.modelRecords()); n != 2 || h.byStart()[1].End != nil {
		t.Fatalf("one frame merged the incidents")
	}
	for ; at < 80; at++ {
		h.frame(at, 3, []string{"u.c", "u.e"}, "u.c", "u.d", "u.e", "u.b")
	}
	early, late := h.byStart()[0], h.byStart()[1]
	if late.EndReason != EndMerged || late.MergedInto != early.ID {
		t.Errorf("later incident: end %q into %q, want merged into %s", late.EndReason, late.MergedInto, early.ID)
	}
	if early.End != nil || !slices.Contains(early.Merged, late.ID) || !slices.Equal(early.Location, []string{"u.a", "u.b", "u.c", "u.d", "u.e"}) {
		t.Errorf("earlier incident: end %v merged %v location %v", early.End, early.Merged, early.Location)
	}
}

// TestSingleIncident: Rules.SingleIncident keeps one model incident per
// unit and freezes learning as before.
func TestSingleIncident(t *testing.T) {
	h, ml := locHarness(t, Config{Rules: Rules{SingleIncident: true}})
	for at := 0.0; at < 60; at++ {
		h.frame(at, 3, []string{"u.a"})
	}
	for at := 60.0; at < 120; at++ {
		h.frame(at, 3, []string{"u.c"})
	}
	if n := len(h.modelRecords()); n != 1 {
		t.Errorf("%d incidents, want 1", n)
	}
	if len(ml.masks) != 0 || !slices.Equal(ml.calls, []string{"freeze u"}) {
		t.Errorf("masks %v, learning calls %v", ml.masks, ml.calls)
	}
}

// TestBoundedHold: an incident flat for AcceptAfter (less the time its
// statistics need to return, holdbound.go) is accepted as the new normal
// (record, model state, mask released) and ends "new_normal" when its
// statistics return; a growing one is not.
func TestBoundedHold(t *testing.T) {
	h, ml := locHarness(t, Config{Rules: Rules{AcceptAfter: 10 * time.Minute}})
	at := 0.0
	for ; at < 200; at++ {
		h.frame(at, 3, []string{"u.a"}, "u.a")
	}
	r := h.last()
	if r.Accepted != nil || !slices.Equal(ml.masks["u"], []string{"u.a"}) {
		t.Fatalf("accepted early %+v, mask %v", r.Accepted, ml.masks["u"])
	}
	// Growth restarts the hold.
	for ; at < 900; at++ {
		h.frame(at, 3+at/100, []string{"u.a"}, "u.a")
	}
	if r := h.last(); r.Accepted != nil {
		t.Fatalf("a growing incident was accepted at %v", r.Accepted.At)
	}
	for ; at < 900+360 && h.last().Accepted == nil; at++ {
		h.frame(at, 12, []string{"u.a"}, "u.a")
	}
	r = h.last()
	if r.Accepted == nil || r.Accepted.By != holdBy || r.ModelState != ModelAccepted {
		t.Fatalf("not accepted after the hold: %+v, state %s", r.Accepted, r.ModelState)
	}
	if len(ml.masks["u"]) != 0 {
		t.Errorf("mask still %v after acceptance", ml.masks["u"])
	}
	if ev := h.eventsOf(EventAccept); len(ev) != 1 {
		t.Errorf("accept events %v", ev)
	}
	for ; at < 2000; at++ {
		h.frame(at, 0.1, nil)
	}
	if r := h.last(); r.End == nil || r.EndReason != EndNewNormal {
		t.Errorf("end %v reason %q", r.End, r.EndReason)
	}
}

// TestAcceptCommand: the operator accepts one incident or a unit's; the
// record carries who and when like an acknowledgement.
func TestAcceptCommand(t *testing.T) {
	h, ml := locHarness(t, Config{})
	for at := 0.0; at < 30; at++ {
		h.frame(at, 3, []string{"u.a"}, "u.a")
	}
	for at := 30.0; at < 60; at++ {
		h.frame(at, 3, []string{"u.c", "u.a"}, "u.c")
	}
	recs := h.modelRecords()
	if len(recs) != 2 {
		t.Fatalf("%d incidents", len(recs))
	}
	id := h.byStart()[0].ID
	rep := h.cmd(Command{Op: OpAccept, AlertID: id, By: "jo", Comment: "new feed grade"})
	if !rep.OK {
		t.Fatal(rep.Error)
	}
	r := h.modelRecords()[id]
	if r.Accepted == nil || r.Accepted.By != "jo" || r.Accepted.Comment != "new feed grade" || r.ModelState != ModelAccepted {
		t.Errorf("record after accept: %+v %s", r.Accepted, r.ModelState)
	}
	if !slices.Equal(ml.masks["u"], []string{"u.c"}) {
		t.Errorf("mask %v", ml.masks["u"])
	}
	rep = h.cmd(Command{Op: OpAccept, Unit: "u", By: "kim"})
	if !rep.OK || !strings.Contains(rep.Message, "1 incident") {
		t.Errorf("unit accept: %+v", rep)
	}
	if len(ml.masks["u"]) != 0 {
		t.Errorf("mask %v", ml.masks["u"])
	}
	for _, bad := range []Command{
		{Op: OpAccept, By: "jo"},
		{Op: OpAccept, Unit: "u", AlertID: id, By: "jo"},
		{Op: OpAccept, Unit: "nope", By: "jo"},
	} {
		if rep := h.cmd(bad); rep.OK {
			t.Errorf("%+v accepted", bad)
		}
	}
}

// byStart returns the latest revisions of the model incidents by start.
func (h *harness) byStart() []*Record {
	var out []*Record
	for _, r := range h.modelRecords() {
		out = append(out, r)
	}
	slices.SortFunc(out, func(a, b *Record) int { return a.Start.Compare(b.Start) })
	return out
}

func keys(m map[string]*Record) []string {
	var out []string
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// TestRestoreVersion1: a snapshot written before incidents per location
// (version 1, no locations) still restores; its open model incident is
// located at its contributors and attributes the next frames.
func TestRestoreVersion1(t *testing.T) {
	h, _ := locHarness(t, Config{})
	for at := 0.0; at < 30; at++ {
		h.frame(at, 3, []string{"u.a", "u.b"}, "u.a", "u.b")
	}
	var buf strings.Builder
	if err := h.e.Snapshot(&buf); err != nil {
		t.Fatal(err)
	}
	// Make it a version-1 snapshot: no version-2 fields.
	var snap map[string]any
	if err := json.Unmarshal([]byte(buf.String()), &snap); err != nil {
		t.Fatal(err)
	}
	snap["version"] = 1
	for _, inc := range snap["incidents"].([]any) {
		delete(inc.(map[string]any), "location")
	}
	for _, u := range snap["units"].([]any) {
		delete(u.(map[string]any), "extra_incidents")
		delete(u.(map[string]any), "new_location")
	}
	old, _ := json.Marshal(snap)
	h2, _ := locHarness(t, Config{})
	if err := h2.e.Restore(bytes.NewReader(old)); err != nil {
		t.Fatalf("version-1 snapshot refused: %v", err)
	}
	for at := 30.0; at < 40; at++ {
		h2.frame(at, 3, []string{"u.a"}, "u.a")
	}
	var recs []Record
	for _, r := range h2.e.Open(nil) {
		if r.Group == GroupModel {
			recs = append(recs, r)
		}
	}
	if len(recs) != 1 || len(h2.modelRecords()) != 0 {
		t.Fatalf("%d open incidents after the restore (%d new records), want the one carried on", len(recs), len(h2.modelRecords()))
	}
	for _, r := range recs {
		if !slices.Equal(r.Location, []string{"u.a", "u.b"}) {
			t.Errorf("restored incident located at %v, want its contributors", r.Location)
		}
	}
}
