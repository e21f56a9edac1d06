package alerts

import (
	"slices"
	"testing"
	"time"
)

// TestRecordNamesTheChannelOverItsLimitLongest: a sensor that drifts is
// over its own contribution limit on every frame of the incident while the
// channels it smeared into lead the single frame of the peak; the record
// names the drifting sensor first (its summed excess, excess.go), with its
// reading, expected value and band from the frame where its own
// RBC/limit was largest, then the peak frame's leaders by their excess.
// Under the rule of the peak frame alone it would be fourth. Invented
// values, shaped on the demo's supply drift (README, Validation).
func TestRecordNamesTheChannelOverItsLimitLongest(t *testing.T) {
	var got []*Record
	// One incident per unit: every frame folds into it (with locations
	// the peak frame's leaders, outside the drift's location, would feed
	// an incident of their own).
	e, err := NewEngine(Config{Rules: Rules{SingleIncident: true}}, PublisherFunc(func(r *Record) { got = append(got, r) }), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	const n = 20
	for k := 1; k <= n+1; k++ {
		o := &Observation{Unit: "cw", Time: t0.Add(time.Duration(k) * time.Minute), ModelState: ModelAdapting,
			Stats: []Stat{{Name: StatT2, Value: 30, Limit: 10}}}
		// The drift: RBC/limit from 2.1 to 4.0 over the first n frames, its
		// reading 24.1 to 26.0 against an expected 24.0 ± 0.3.
		sup := Contributor{Channel: "supply", RBC: 0.2 + 0.01*float64(k), Limit: 0.1, Share: 0.6,
			Reading: 24 + 0.1*float64(k), Expected: 24, Band: 0.3, BandCoverage: 0.95}
		o.Contributors = []Contributor{sup, {Channel: "basin", RBC: 0.05, Limit: 0.5, Share: 0.1}}
		if k == n+1 { // the peak: the smeared channels lead, the drift still over its limit
			o.Stats[0].Value = 60
			sup.RBC, sup.Reading = 0.15, 26.1
			o.Contributors = []Contributor{{Channel: "hx", RBC: 5, Limit: 1, Share: 0.4}, {Channel: "fan", RBC: 4, Limit: 1, Share: 0.3},
				{Channel: "basin", RBC: 3, Limit: 1, Share: 0.2}, sup, {Channel: "bearing", RBC: 0.1, Limit: 1, Share: 0.01}}
		}
		if err := e.Observe(o); err != nil {
			t.Fatal(err)
		}
	}
	open := e.Open(nil) // the record as it stands after the peak
	if len(got) == 0 || len(open) != 1 {
		t.Fatalf("%d records published, %d open, want an open one", len(got), len(open))
	}
	r := &open[0]
	validateRecord(t, r)
	var names []string
	for i, c := range r.Contributors {
		names = append(names, c.Channel)
		if c.Rank != i+1 {
			t.Errorf("%s has rank %d at place %d", c.Channel, c.Rank, i+1)
		}
	}
	// supply: Σ(RBC/limit − 1) = 1.0 + 0.1k over the frames k in alarm,
	// then 0.5 at the peak; hx 4, fan 3, basin 2 (under its limit before
	// the peak); bearing never over: from the peak frame.
	if want := []string{"supply", "hx", "fan", "basin", "bearing"}; !slices.Equal(names, want) {
		t.Fatalf("contributors %v, want %v", names, want)
	}
	c := r.Contributors[0]
	if c.Reading != 26 || c.Expected != 24 || c.Band != 0.3 || c.BandCoverage != 0.95 {
		t.Errorf("supply: reading %v expected %v ± %v (%v), want the frame of its largest RBC/limit: 26 expected 24 ± 0.3 (0.95)",
			c.Reading, c.Expected, c.Band, c.BandCoverage)
	}
	if r.Peak.Value != 60 {
		t.Errorf("peak %v, want 60 (the peak is still the frame's)", r.Peak.Value)
	}
}

// TestMergeExcess: merging two incidents adds their sums channel by channel
// and keeps each channel's larger peak, and the merged list is a copy.
func TestMergeExcess(t *testing.T) {
	mk := func(ch string, sum, rbc float64) chanExcess {
		return chanExcess{Sum: sum, Best: RecordContributor{Channel: ch, RBC: rbc, RBCLimit: 1, Modes: []int{1}}}
	}
	a := &incident{excess: []chanExcess{mk("x", 2, 3), mk("y", 1, 2)}}
	b := &incident{excess: []chanExcess{mk("y", 5, 4), mk("z", 0.5, 1.5)}}
	mergeExcess(a, b)
	want := []chanExcess{mk("x", 2, 3), mk("y", 6, 4), mk("z", 0.5, 1.5)}
	if len(a.excess) != len(want) {
		t.Fatalf("merged %d channels, want %d", len(a.excess), len(want))
	}
	for i, w := range want {
		g := a.excess[i]
		if g.Best.Channel != w.Best.Channel || g.Sum != w.Sum || g.Best.RBC != w.Best.RBC {
			t.Errorf("channel %d: %s sum %v peak %v, want %s %v %v", i, g.Best.Channel, g.Sum, g.Best.RBC, w.Best.Channel, w.Sum, w.Best.RBC)
		}
	}
	b.excess[1].Best.Modes[0] = 9
	if a.excess[2].Best.Modes[0] != 1 {
		t.Error("the merged list shares its modes with the incident merged in")
	}
}
