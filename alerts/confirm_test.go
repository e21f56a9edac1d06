package alerts

import (
	"bytes"
	"fmt"
	"testing"
	"time"
)

// confirmPlot is the T² ratio value/limit of each frame: two episodes that
// reach active only through the 3-of-5 count (over, under, over, under,
// over), one that never does (two overs in five frames), and quiet frames
// between them.
var confirmPlot = []float64{
	0.5, 0.5, 0.5, 0.5, 0.5,
	2, 0.5, 2, 0.5, 2, // frames 5–9: active at frame 9 (3 of 5)
	2, 2, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, // back to normal
	2, 0.5, 0.5, 2, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, // frames 21–30: 2 of 5 only
	2, 0.5, 2, 0.5, 2, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, // frames 31–35: active at 35
}

// confirmRun feeds frames [from, to) of confirmPlot to unit "u" of e.
func confirmRun(t *testing.T, e *Engine, from, to int) {
	t.Helper()
	for s := from; s < to; s++ {
		o := Observation{Unit: "u", Time: sec(float64(s)), ModelState: ModelAdapting}
		o.Stats = []Stat{{StatT2, 10 * confirmPlot[s], 10}, {StatSPE, 1, 5}}
		o.Contributors = []Contributor{{Channel: "u.c.x", Share: 1, RBC: 2, Limit: 1}}
		if err := e.Observe(&o); err != nil {
			t.Fatal(err)
		}
	}
}

func newConfirmRecorder(t *testing.T, out *[]string) *Engine {
	return newRecorderRules(t, out, Rules{OnCount: 3, OnWindow: 5, OffDelay: time.Second})
}

// TestSnapshotRestoreConfirming: a snapshot cut while a 3-of-5 alarm is
// over the limit in fewer than 3 of its last 5 frames (confirming) carries
// the n-of-m window, so the restored engine raises the alarm at the same
// frame as an uninterrupted run, and not at all where the run never
// reaches 3 of 5. The expected records are those of the uninterrupted run
// of the same engine; a restore that drops the window (and so resets the
// count) raises the first alarm late and the second one never.
func TestSnapshotRestoreConfirming(t *testing.T) {
	end := len(confirmPlot)
	var want []string
	confirmRun(t, newConfirmRecorder(t, &want), 0, end)
	// Two alarms, each published at least when it opens and when it ends.
	if len(want) < 4 {
		t.Fatalf("uninterrupted run published %d records, want the two 3-of-5 alarms: %q", len(want), want)
	}
	for _, cut := range []int{6, 7, 8, 9, 22, 25, 32, 33, 34, 35} {
		t.Run(fmt.Sprint(cut), func(t *testing.T) {
			var got []string
			e1 := newConfirmRecorder(t, &got)
			confirmRun(t, e1, 0, cut)
			// The cut falls inside a confirming episode: the T² alarm is
			// neither normal nor active and its window holds over frames.
			a := e1.units["u"].stats[statIndex(StatT2)]
			if a.State() == Normal || a.State() == Active || a.window == 0 {
				t.Fatalf("cut %d: T² alarm %v with window %b, want it confirming", cut, a.State(), a.window)
			}
			var buf bytes.Buffer
			if err := e1.Snapshot(&buf); err != nil {
				t.Fatal(err)
			}
			e2 := newConfirmRecorder(t, &got)
			if err := e2.Restore(bytes.NewReader(buf.Bytes())); err != nil {
				t.Fatal(err)
			}
			confirmRun(t, e2, cut, end)
			if len(got) != len(want) {
				t.Fatalf("%d records after the restore, want %d:\n got %q\nwant %q", len(got), len(want), got, want)
			}
			for i := range want {
				if got[i] != want[i] {
					t.Fatalf("record %d differs:\n got %s\nwant %s", i, got[i], want[i])
				}
			}
		})
	}
}
