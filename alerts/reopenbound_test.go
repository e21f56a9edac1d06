package alerts

import (
	"bytes"
	"encoding/json"
	"fmt"
	"strings"
	"testing"
)

// TestRecentBoundOnRestore: the incidents of a unit that may re-open are
// at most recentKept (the engine drops the oldest); a snapshot listing
// more is refused, naming the list, instead of restoring a list the
// engine's bound never trims again.
func TestRecentBoundOnRestore(t *testing.T) {
	h, _ := locHarness(t, Config{})
	at := 0.0
	for k := range recentKept + 2 {
		// A fault at its own place (specific: a new incident each time),
		// then back to normal past the off-delay.
		for ; at < float64(k)*900+120; at++ {
			o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting,
				Stats:        []Stat{{StatT2, 1, 10}, {StatSPE, 1, 5}, {StatPhi, 3, 1}},
				Contributors: []Contributor{{Channel: fmt.Sprintf("u.p%02d.flow", k), RBC: 9, Limit: 2, Share: 0.9}}}
			if err := h.e.Observe(&o); err != nil {
				t.Fatal(err)
			}
		}
		for ; at < float64(k+1)*900; at++ {
			o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting,
				Stats: []Stat{{StatT2, 1, 10}, {StatSPE, 1, 5}, {StatPhi, 0.2, 1}}}
			if err := h.e.Observe(&o); err != nil {
				t.Fatal(err)
			}
		}
	}
	if n := len(h.e.units["u"].recent.incs); n != recentKept {
		t.Fatalf("%d incidents may re-open, want the bound %d", n, recentKept)
	}
	var buf bytes.Buffer
	if err := h.e.Snapshot(&buf); err != nil {
		t.Fatal(err)
	}
	// Put the two older ended incidents, still in the snapshot, in front
	// of the list: ten, oldest end first.
	old := []string{"u/model/20260302T080002Z", "u/model/20260302T081502Z"}
	for _, id := range old {
		if !bytes.Contains(buf.Bytes(), []byte(`"id":"`+id+`"`)) {
			t.Fatalf("the snapshot does not hold incident %s", id)
		}
	}
	var snap map[string]any
	if err := json.Unmarshal(buf.Bytes(), &snap); err != nil {
		t.Fatal(err)
	}
	u := snap["units"].([]any)[0].(map[string]any)
	u["recent_incidents"] = append([]any{old[0], old[1]}, u["recent_incidents"].([]any)...)
	b, err := json.Marshal(snap)
	if err != nil {
		t.Fatal(err)
	}
	h2, _ := locHarness(t, Config{})
	err = h2.e.Restore(bytes.NewReader(b))
	if err == nil || !strings.Contains(err.Error(), "recent") {
		t.Fatalf("a snapshot with %d incidents that may re-open: Restore = %v, want an error naming the list", recentKept+2, err)
	}
	// The same snapshot unedited restores.
	h3, _ := locHarness(t, Config{})
	if err := h3.e.Restore(&buf); err != nil {
		t.Fatal(err)
	}
}
