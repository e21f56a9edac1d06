package alerts

import (
	"bytes"
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"
)

// stuckTrace replays one unit with many channels stuck in the same frame
// (a flood), going stale together, then recovering together, and returns
// every published record and every Open listing, as JSON lines.
func stuckTrace(t *testing.T, nch int) []string {
	t.Helper()
	var out []string
	e, err := NewEngine(Config{StaleAfter: 10 * time.Minute}, PublisherFunc(func(r *Record) {
		b, err := json.Marshal(r)
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, string(b))
	}), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	e.SetClock(func() time.Time { return time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC) })
	stuck := make([]Quality, nch)
	for i := range stuck {
		stuck[i] = Quality{Channel: fmt.Sprintf("u.c%02d.x", i), Kind: QualityStuck}
	}
	listOpen := func() {
		b, err := json.Marshal(e.Open(nil))
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, "open "+string(b))
	}
	for s := 0; s < 120; s++ {
		o := Observation{Unit: "u", Time: sec(float64(30 * s)), ModelState: ModelAdapting}
		if s >= 2 && s < 60 {
			o.Quality = stuck
		}
		if err := e.Observe(&o); err != nil {
			t.Fatal(err)
		}
		if s == 3 || s == 40 || s == 62 {
			listOpen()
		}
	}
	var snap bytes.Buffer
	if err := e.Snapshot(&snap); err != nil {
		t.Fatal(err)
	}
	out = append(out, "snapshot "+snap.String())
	return out
}

// TestStuckTogetherDeterministic: several channels of one unit stuck in
// the same frame give the same records, in the same order, on every run
// (their alarms were walked in Go map order, which differs between runs).
func TestStuckTogetherDeterministic(t *testing.T) {
	want := stuckTrace(t, 24)
	if len(want) < 24*3 {
		t.Fatalf("only %d records: the scenario does not open, stale and close every alert", len(want))
	}
	for run := 1; run < 20; run++ {
		got := stuckTrace(t, 24)
		if len(got) != len(want) {
			t.Fatalf("run %d: %d records, want %d", run, len(got), len(want))
		}
		for i := range got {
			if got[i] != want[i] {
				t.Fatalf("run %d: record %d differs:\n got %s\nwant %s", run, i, got[i], want[i])
			}
		}
	}
}

// TestCommandValidateOrder: a command with every text field too long is
// refused with the fields named in their order, the same on every call
// (they were checked in Go map order).
func TestCommandValidateOrder(t *testing.T) {
	long := strings.Repeat("x", maxText+1)
	c := Command{Op: OpAccept, By: long, Reason: long, Comment: long, AlertID: long, Unit: long}
	var names []string
	for _, f := range []string{"by", "reason", "comment", "alert_id", "unit"} {
		names = append(names, fmt.Sprintf("field %q: longer than %d bytes", f, maxText))
	}
	want := strings.Join(names, "; ")
	for run := 0; run < 20; run++ {
		err := c.Validate()
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Fatalf("run %d: %v\nwant it to hold %s", run, err, want)
		}
	}
}
