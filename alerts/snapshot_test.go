package alerts

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
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
	for s := from; s < to; s++ {
		o := Observation{Unit: "u", Time: sec(float64(s)), ModelState: ModelAdapting}
		r := 0.5
		switch {
		case s == 10 || s == 30 || s == 45: // chattering
			r = 2
		case s >= 200 && s < 900:
			r = 1.5 + float64(s%97)/40
		}
		o.Stats = []Stat{{StatT2, 10 * r, 10}, {StatSPE, 2, 5}, {StatPhi, r, 1}}
		o.Contributors = []Contributor{{Channel: fmt.Sprintf("u.c%d.x", s%3), Share: 0.5, RBC: 2, Limit: 1, Modes: []int{s % 4}}}
		if s >= 300 && s < 300+12*20 && (s-300)%20 == 0 {
			o.Quality = []Quality{{Channel: fmt.Sprintf("u.q%d.x", (s-300)/20), Kind: QualityStuck}}
		}
		if s >= 100 && s < 500 {
			o.Missing = []string{"u.tank.level"}
		}
		if err := e.Observe(&o); err != nil {
			t.Fatal(err)
		}
		switch s {
		case 250, 1010:
			for _, id := range openIDs(e) {
				e.Handle(context.Background(), Command{Op: OpAck, AlertID: id, By: "jo"})
			}
		case 260:
			for _, id := range openIDs(e) {
				if strings.Contains(id, "/model/") {
					e.Handle(context.Background(), Command{Op: OpShelve, AlertID: id, By: "jo", Reason: "test", For: Duration(5 * time.Minute)})
				}
			}
		}
	}
	_ = out
}

func openIDs(e *Engine) []string {
	var ids []string
	for _, r := range e.Open(nil) {
		ids = append(ids, r.ID)
	}
	return ids
}

func newRecorder(t *testing.T, out *[]string) *Engine {
	e, err := NewEngine(Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: 3 * time.Second}},
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
			e1 := newRecorder(t, &got)
			scenario(t, e1, &got, 0, cut)
			var buf bytes.Buffer
			if err := e1.Snapshot(&buf); err != nil {
				t.Fatal(err)
			}
			e2 := newRecorder(t, &got)
			if err := e2.Restore(bytes.NewReader(buf.Bytes())); err != nil {
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
		`{"version":2}`,
		`{"version":1,"units":[{"name":"u","flood":"nope"}]}`,
		`{"version":1,"units":[{"name":""}]}`,
		`not json`,
	} {
		if err := e.Restore(strings.NewReader(bad)); err == nil {
			t.Errorf("%s: accepted", bad)
		}
	}
}
