package statuspage

import (
	"math"
	"testing"
	"time"
)

// TestHistoryBounded: a unit's ring never grows past its buckets whatever
// the number of frames, each bucket keeps its frame with the largest
// value/limit ratio, the window is cut at the ring's span, units past the
// cap are counted and not kept, and Add allocates nothing for a known unit.
func TestHistoryBounded(t *testing.T) {
	h := NewHistory(time.Minute, 60, 2)
	t0 := time.Date(2026, 3, 3, 0, 0, 0, 0, time.UTC)
	for k := 0; k < 3*3600; k++ { // three hours at 1 s into an hour's ring
		v := 1.0
		if k%60 == 17 {
			v = 5 // one excursion per minute, with a limit of 10 → ratio 0.5
		}
		h.Add("a", t0.Add(time.Duration(k)*time.Second), Stats{T2: v, T2Limit: 10, SPE: math.NaN(), SPELimit: math.NaN(), Phi: 2, PhiLimit: 4})
	}
	if r := h.units["a"]; len(r.b) != 60 || r.n != 60 {
		t.Fatalf("ring holds %d of %d buckets, want 60 of 60", r.n, len(r.b))
	}
	end := t0.Add(3*time.Hour - time.Second)
	tr, ok := h.Trend("a", end, 2*time.Hour, 30)
	if !ok {
		t.Fatal("unit a not found")
	}
	if len(tr.T2.Value) != 30 || tr.StepS != 240 {
		t.Fatalf("%d points of %g s, want 30 of 240 s", len(tr.T2.Value), tr.StepS)
	}
	// The first half of a 2 h window is older than the 1 h ring: empty.
	if tr.T2.Value[0] != nil || tr.T2.Value[29] == nil {
		t.Errorf("points 0 and 29: %v %v, want empty and kept", tr.T2.Value[0], tr.T2.Value[29])
	}
	if got := *tr.T2.Value[29]; got != 5 {
		t.Errorf("bucket maximum %g, want the excursion 5", got)
	}
	if tr.SPE.Value[29] != nil {
		t.Errorf("SPE not computed but shown as %v", *tr.SPE.Value[29])
	}
	if *tr.Phi.Value[29] != 2 || *tr.Phi.Limit[29] != 4 {
		t.Errorf("φ %v/%v, want 2/4", *tr.Phi.Value[29], *tr.Phi.Limit[29])
	}
	h.Add("b", t0, Stats{})
	h.Add("c", t0, Stats{})
	if h.Dropped() != 1 || len(h.units) != 2 {
		t.Errorf("%d units kept, %d dropped; want 2 and 1", len(h.units), h.Dropped())
	}
	tt := end
	allocs := testing.AllocsPerRun(100, func() {
		tt = tt.Add(time.Second)
		h.Add("a", tt, Stats{T2: 1, T2Limit: 2})
	})
	if allocs != 0 {
		t.Errorf("Add allocates %g times per frame", allocs)
	}
}
