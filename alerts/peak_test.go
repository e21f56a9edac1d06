package alerts

import (
	"fmt"
	"testing"
	"time"
)

// TestPeakNotAfterUpdated: no record carries a peak later than its updated
// time, neither the revisions published (a flood whose end is found only at
// a later frame closes as of the instant its count dropped, and annunciates
// the model incident it held back at the frame that found the end) nor the
// open alerts read between revisions (Engine.Open), whose peaks have moved
// on since the last revision.
func TestPeakNotAfterUpdated(t *testing.T) {
	var recs []*Record
	e, err := NewEngine(Config{
		Rules:    Rules{OnCount: 1, OnWindow: 1, OffDelay: time.Hour, FloodCount: 2, FloodWindow: 10 * time.Second},
		FloodEnd: 1,
	}, PublisherFunc(func(r *Record) { c := *r; recs = append(recs, &c) }), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	frames := []int{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 20, 21, 22} // no frames from 15 s to 20 s
	for _, s := range frames {
		o := Observation{Unit: "u", Time: sec(float64(s)), ModelState: ModelAdapting}
		r := 0.5
		if s >= 6 {
			r = float64(s) // over from 6 s, during the flood, and rising: the peak moves with every frame
		}
		o.Stats = []Stat{{StatT2, 10 * r, 10}, {StatSPE, 1, 5}}
		o.Contributors = []Contributor{{Channel: "u.c.x", Share: 1, RBC: 2, Limit: 1}}
		if s == 5 { // three stuck channels at once: a flood
			for q := range 3 {
				o.Quality = append(o.Quality, Quality{Channel: fmt.Sprintf("u.q%d.x", q), Kind: QualityStuck})
			}
		}
		if err := e.Observe(&o); err != nil {
			t.Fatal(err)
		}
	}
	// The open alerts as the API shows them, between revisions: their
	// peaks have moved on since the last one published.
	for _, r := range e.Open(nil) {
		c := r
		recs = append(recs, &c)
	}
	var flood, model bool
	for _, r := range recs {
		flood = flood || (r.Kind == KindFlood && r.End != nil)
		if r.Group == GroupModel {
			model = true
		}
		for _, st := range r.Statistics {
			if st.PeakTime.After(r.Updated) {
				t.Errorf("%s rev %d: %s peak at %v, after updated %v", r.ID, r.Revision, st.Name, st.PeakTime, r.Updated)
			}
		}
		if r.Peak.Time.After(r.Updated) {
			t.Errorf("%s rev %d: peak at %v, after updated %v", r.ID, r.Revision, r.Peak.Time, r.Updated)
		}
	}
	if !flood || !model {
		t.Fatalf("the scenario must end a flood and publish the model incident it held: flood ended %v, model published %v", flood, model)
	}
}
