package alerts

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"
)

// scenario drives an engine through frames [from, to) of a fixed plot: a T²
// excursion that chatters, a long one that gets acknowledged and shelved,
// a flood of stuck channels, a missing channel. It returns the JSON of
// every record published.
func scenario(t *testing.T, e *Engine, out *[]string, from, to int) {
	t.Helper()
	scenarioUnit(t, e, "u", from, to)
	_ = out
}

// scenarioUnit is scenario for unit name; its commands touch only that
// unit's alerts.
func scenarioUnit(t *testing.T, e *Engine, name string, from, to int) {
	t.Helper()
	for s := from; s < to; s++ {
		o := Observation{Unit: name, Time: sec(float64(s)), ModelState: ModelAdapting}
		r := 0.5
		switch {
		case s == 10 || s == 30 || s == 45: // chattering
			r = 2
		case s >= 200 && s < 900:
			r = 1.5 + float64(s%97)/40
		}
		o.Stats = []Stat{{StatT2, 10 * r, 10}, {StatSPE, 2, 5}, {StatPhi, r, 1}}
		o.Contributors = []Contributor{{Channel: fmt.Sprintf("%s.c%d.x", name, s%3), Share: 0.5, RBC: 2, Limit: 1, Modes: []int{s % 4}}}
		if s >= 300 && s < 300+12*20 && (s-300)%20 == 0 {
			o.Quality = []Quality{{Channel: fmt.Sprintf("%s.q%d.x", name, (s-300)/20), Kind: QualityStuck}}
		}
		if s >= 100 && s < 500 {
			o.Missing = []string{name + ".tank.level"}
		}
		if err := e.Observe(&o); err != nil {
			t.Fatal(err)
		}
		switch s {
		case 250, 1010:
			for _, id := range openIDs(e, name) {
				e.Handle(context.Background(), Command{Op: OpAck, AlertID: id, By: "jo"})
			}
		case 260:
			for _, id := range openIDs(e, name) {
				if strings.Contains(id, "/model/") {
					e.Handle(context.Background(), Command{Op: OpShelve, AlertID: id, By: "jo", Reason: "test", For: Duration(5 * time.Minute)})
				}
			}
		}
	}
}

// openIDs lists the open alerts of unit.
func openIDs(e *Engine, unit string) []string {
	var ids []string
	for _, r := range e.Open(nil) {
		if r.Unit == unit {
			ids = append(ids, r.ID)
		}
	}
	return ids
}

func newRecorder(t *testing.T, out *[]string) *Engine {
	return newRecorderRules(t, out, Rules{OnCount: 1, OnWindow: 1, OffDelay: 3 * time.Second})
}

// newRecorderRules is an engine with rules that appends the JSON of every
// record it publishes to out, checking each against the schema.
func newRecorderRules(t *testing.T, out *[]string, rules Rules) *Engine {
	t.Helper()
	e, err := NewEngine(Config{Rules: rules},
		PublisherFunc(func(r *Record) {
			validateRecord(t, r)
			b, _ := json.Marshal(r)
			*out = append(*out, string(b))
		}), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	e.SetClock(func() time.Time { return t0 })
	return e
}

// TestSnapshotRestore: stopping at any frame, restoring into a new engine
// and going on gives exactly the records of an uninterrupted run.
// snapshotAfter runs the scenario on a new recording engine up to frame cut
// and returns the engine and its snapshot.
func snapshotAfter(t *testing.T, cut int, got *[]string) (*Engine, []byte) {
	t.Helper()
	e := newRecorder(t, got)
	scenario(t, e, got, 0, cut)
	var buf bytes.Buffer
	if err := e.Snapshot(&buf); err != nil {
		t.Fatal(err)
	}
	return e, buf.Bytes()
}

func TestSnapshotRestore(t *testing.T) {
	const end = 1200
	var want []string
	scenario(t, newRecorder(t, &want), &want, 0, end)
	if len(want) < 20 {
		t.Fatalf("scenario published only %d records", len(want))
	}
	for _, cut := range []int{20, 46, 210, 255, 265, 310, 545, 700, 905, 1011} {
		t.Run(fmt.Sprint(cut), func(t *testing.T) {
			var got []string
			e1, snap := snapshotAfter(t, cut, &got)
			e2 := newRecorder(t, &got)
			if err := e2.Restore(bytes.NewReader(snap)); err != nil {
				t.Fatal(err)
			}
			scenario(t, e2, &got, cut, end)
			if len(got) != len(want) {
				t.Fatalf("%d records, want %d", len(got), len(want))
			}
			for i := range want {
				if got[i] != want[i] {
					t.Fatalf("record %d differs:\n got %s\nwant %s", i, got[i], want[i])
				}
			}
			c1 := e1.Counters(nil)
			c2 := e2.Counters(nil)
			if c1[0].Opened > c2[0].Opened {
				t.Errorf("counters went back: %+v → %+v", c1[0], c2[0])
			}
		})
	}
}

func TestRestoreRejects(t *testing.T) {
	e, _ := NewEngine(Config{}, PublisherFunc(func(*Record) {}), nil, nil)
	for _, bad := range []string{
		`{"version":3}`,
		`{"version":1,"units":[{"name":"u","flood":"nope"}]}`,
		`{"version":2,"units":[{"name":"u","extra_incidents":["nope"]}]}`,
		`{"version":1,"units":[{"name":""}]}`,
		`not json`,
	} {
		if err := e.Restore(strings.NewReader(bad)); err == nil {
			t.Errorf("%s: accepted", bad)
		}
	}
	// A bounded hold out of its range (settling frames, reference, level)
	// is refused as such, before the incident is looked for in its unit.
	for _, hold := range []string{`"hold_settle":-1`, `"hold_settle":100000`, `"hold_ref":-1`, `"hold_level":-0.5`} {
		bad := `{"version":2,"incidents":[{"id":"u/model/1","location":{` + hold + `}}]}`
		if err := e.Restore(strings.NewReader(bad)); err == nil || !strings.Contains(err.Error(), "bounded hold") {
			t.Errorf("%s: %v, want the bounded hold refused", bad, err)
		}
	}
	// So is a unit's hold cover (holdbound.go) with a level or reference
	// that is negative or not a number.
	for _, cover := range []string{`"level":-1,"ref":1`, `"level":1,"ref":-0.5`} {
		bad := `{"version":2,"units":[{"name":"u","hold_cover":{"channels":["u.a"],` + cover + `}}]}`
		if err := e.Restore(strings.NewReader(bad)); err == nil || !strings.Contains(err.Error(), "hold cover") {
			t.Errorf("%s: %v, want the hold cover refused", bad, err)
		}
	}
}

// TestSnapshotUnit: one unit's state, snapshotted alone at any frame and
// restored into another engine that runs a different unit, goes on to
// publish exactly the records of an uninterrupted run, while the other
// unit's records are exactly those it publishes running alone.
func TestSnapshotUnit(t *testing.T) {
	const end = 1200
	byUnit := func(recs []string, unit string) []string {
		var out []string
		for _, r := range recs {
			if strings.Contains(r, `"unit":"`+unit+`"`) {
				out = append(out, r)
			}
		}
		return out
	}
	// Uninterrupted: units a and b in one engine; c alone in another.
	var whole, solo []string
	w := newRecorder(t, &whole)
	for s := 0; s < end; s++ {
		scenarioUnit(t, w, "a", s, s+1)
		scenarioUnit(t, w, "b", s, s+1)
	}
	scenarioUnit(t, newRecorder(t, &solo), "c", 0, end)
	wantA := byUnit(whole, "a")
	if len(wantA) < 20 || len(solo) < 20 {
		t.Fatalf("scenario published only %d and %d records", len(wantA), len(solo))
	}
	for _, cut := range []int{46, 255, 265, 545, 905} {
		t.Run(fmt.Sprint(cut), func(t *testing.T) {
			var first, second []string
			e1 := newRecorder(t, &first)
			for s := 0; s < cut; s++ {
				scenarioUnit(t, e1, "a", s, s+1)
				scenarioUnit(t, e1, "b", s, s+1)
			}
			var buf bytes.Buffer
			if err := e1.SnapshotUnit("a", &buf); err != nil {
				t.Fatal(err)
			}
			// Another instance, running unit c since frame 0.
			e2 := newRecorder(t, &second)
			learn := &learnLog{}
			e2.learn = learn
			scenarioUnit(t, e2, "c", 0, cut)
			if err := e2.RestoreUnit("b", bytes.NewReader(buf.Bytes())); err == nil {
				t.Error("the snapshot of unit a was restored as unit b")
			}
			learn.calls = nil
			if err := e2.RestoreUnit("a", bytes.NewReader(buf.Bytes())); err != nil {
				t.Fatal(err)
			}
			// Only unit a's learning is set, and only if it was frozen.
			wantCalls := "[]"
			if c := e1.Counters(nil); c[0].Frozen {
				wantCalls = "[freeze a]"
			}
			if fmt.Sprint(learn.calls) != wantCalls {
				t.Errorf("learning callbacks at the restore: %v, want %s", learn.calls, wantCalls)
			}
			for s := cut; s < end; s++ {
				scenarioUnit(t, e2, "a", s, s+1)
				scenarioUnit(t, e2, "c", s, s+1)
			}
			got := append(byUnit(first, "a"), byUnit(second, "a")...)
			if fmt.Sprint(got) != fmt.Sprint(wantA) {
				t.Errorf("unit a: %d records after the move, %d uninterrupted", len(got), len(wantA))
				for i := range min(len(got), len(wantA)) {
					if got[i] != wantA[i] {
						t.Fatalf("record %d differs:\n got %s\nwant %s", i, got[i], wantA[i])
					}
				}
			}
			if gotC := byUnit(second, "c"); fmt.Sprint(gotC) != fmt.Sprint(solo) {
				t.Errorf("unit c disturbed by the restore of a: %d records, %d alone", len(gotC), len(solo))
			}
			if n := len(byUnit(second, "b")); n != 0 {
				t.Errorf("unit b, not moved, published %d records in the second engine", n)
			}
		})
	}
	// A snapshot of the whole engine also restores a single unit (the
	// alarm file of earlier checkpoints), and a unit it lacks is reset.
	var all bytes.Buffer
	if err := w.Snapshot(&all); err != nil {
		t.Fatal(err)
	}
	var none []string
	e3 := newRecorder(t, &none)
	if err := e3.RestoreUnit("b", bytes.NewReader(all.Bytes())); err != nil {
		t.Fatal(err)
	}
	if c := e3.Counters(nil); len(c) != 1 || c[0].Unit != "b" || c[0].Frames != end {
		t.Errorf("counters after restoring b from a whole snapshot: %+v", c)
	}
	if err := e3.RestoreUnit("b", strings.NewReader(`{"version":1,"unit":"b","units":[],"incidents":[]}`)); err != nil {
		t.Fatal(err)
	}
	if c := e3.Counters(nil); len(c) != 0 {
		t.Errorf("unit b not reset by an empty snapshot: %+v", c)
	}
}

// TestRestoreFormerStateNames: a snapshot written before the alarm states
// were renamed (confirming was "pending", clearing was "returning") restores
// to the same continuation as one with the current names.
func TestRestoreFormerStateNames(t *testing.T) {
	const end = 1200
	var want []string
	scenario(t, newRecorder(t, &want), &want, 0, end)
	seen := map[string]bool{}
	for cut := 10; cut < end; cut += 15 {
		var got []string
		_, snap := snapshotAfter(t, cut, &got)
		old := string(snap)
		for cur, former := range map[string]string{`"state":"confirming"`: `"state":"pending"`, `"state":"clearing"`: `"state":"returning"`} {
			if strings.Contains(old, cur) {
				seen[cur] = true
				old = strings.ReplaceAll(old, cur, former)
			}
		}
		if old == string(snap) {
			continue
		}
		e2 := newRecorder(t, &got)
		if err := e2.Restore(strings.NewReader(old)); err != nil {
			t.Fatalf("cut %d: %v", cut, err)
		}
		scenario(t, e2, &got, cut, end)
		if !slices.Equal(got, want) {
			t.Fatalf("cut %d: the continuation from former state names differs", cut)
		}
	}
	if len(seen) != 2 {
		t.Fatalf("no cut caught both a confirming and a clearing alarm: %v", seen)
	}
}

// TestNewPointSnapshotRefused: a snapshot whose new-operating-point state
// the rule cannot reach is refused with its reason, and the engine keeps
// its state: a record time after the unit's last frame (it would keep the
// rule from noting any point until then) and a point being learned with
// no record time (it would escalate at the next frame).
func TestNewPointSnapshotRefused(t *testing.T) {
	h, _ := pointHarness(t, Config{})
	h.pointFrames(0, 10, 1.5, 0.2, 0.2, false)
	h.pointFrames(10, 20, 1.5, 0.2, 0.2, true)
	snap := h.snapshot()
	for _, c := range []struct {
		name string
		edit func(p map[string]any)
		want string
	}{
		{"record after the last frame", func(p map[string]any) { p["last"] = "2100-01-01T00:00:00Z" },
			"new_point: last record 2100-01-01T00:00:00Z after the unit's last frame"},
		{"learning without a record", func(p map[string]any) { delete(p, "last") }, "learning a point that has no record time"},
	} {
		t.Run(c.name, func(t *testing.T) {
			var s map[string]any
			if err := json.Unmarshal(snap, &s); err != nil {
				t.Fatal(err)
			}
			u := s["units"].([]any)[0].(map[string]any)
			p, ok := u["new_point"].(map[string]any)
			if !ok || p["learning"] != true {
				t.Fatalf("the snapshot holds no point being learned: %v", u["new_point"])
			}
			c.edit(p)
			b, err := json.Marshal(s)
			if err != nil {
				t.Fatal(err)
			}
			fresh, _ := pointHarness(t, Config{})
			before := fresh.snapshot()
			if err := fresh.e.Restore(bytes.NewReader(b)); err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("restore: %v, want %q", err, c.want)
			}
			if !bytes.Equal(before, fresh.snapshot()) {
				t.Errorf("a refused snapshot changed the engine")
			}
		})
	}
}
