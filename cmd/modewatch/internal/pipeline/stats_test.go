package pipeline

import (
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
	"modewatch/tracker/modes"
)

// TestFrameStats: model.statistics picks the statistics, model.smoothing
// replaces each by the EWMA of its ratio to its limit (hand-computed:
// ratios 4, 0, 2 at λ = 0.5 give 4, 2, 2), and the budget scale multiplies
// every limit handed to the alarm engine until DropCalibration.
func TestFrameStats(t *testing.T) {
	u := &Unit{stats: configs.Statistics{T2: true, Residual: true}, scale: 1}
	s := &tracker.Score{T2: 8, T2Limit: 2, SPE: 1, SPELimit: 1, Residual: 3, ResidualLimit: 6}
	u.frameStats(s)
	got := u.appendStats(nil)
	want := []alerts.Stat{{Name: alerts.StatT2, Value: 8, Limit: 2}, {Name: alerts.StatResidual, Value: 3, Limit: 6}}
	if len(got) != 2 || got[0] != want[0] || got[1] != want[1] {
		t.Fatalf("stats %+v, want %+v", got, want)
	}
	u.scale = 1.5
	if got := u.appendStats(nil); got[0].Limit != 3 || got[1].Limit != 9 {
		t.Errorf("scaled limits %v, %v; want 3, 9", got[0].Limit, got[1].Limit)
	}
	if u.LimitScale() != 1.5 {
		t.Errorf("LimitScale %v, want 1.5", u.LimitScale())
	}
	u.DropCalibration()
	if got := u.appendStats(nil); got[0].Limit != 2 || u.LimitScale() != 1 {
		t.Errorf("after DropCalibration: limit %v, scale %v; want 2, 1", got[0].Limit, u.LimitScale())
	}
	u = &Unit{stats: configs.Statistics{T2: true}, scale: 1, smooth: 0.5}
	for i, c := range []struct{ v, want float64 }{{8, 4}, {0, 2}, {4, 2}} {
		u.frameStats(&tracker.Score{T2: c.v, T2Limit: 2})
		if len(u.last) != 1 || u.last[0].Value != c.want || u.last[0].Limit != 1 {
			t.Errorf("frame %d: %+v, want value %v against limit 1", i, u.last, c.want)
		}
	}
}

// TestLeadRelation: on an invented 5-channel unit where c = a + b holds to
// 1 % (d and e loose), one relation mode finds {a, b, c}; a frame that
// breaks it raises the relation statistic over its limit, and the
// contributors handed to the alarm engine start with a, b and c.
func TestLeadRelation(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	frame := func() []float64 {
		a, b := rng.NormFloat64(), rng.NormFloat64()
		return []float64{a, b, a + b + 0.01*rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
	}
	tr, err := tracker.New(5, tracker.Config{Period: time.Second, Relations: 1, Modes: modes.Config{Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	rows := make([][]float64, 5000)
	for k := range rows {
		rows[k] = frame()
	}
	if err := tr.Fit(rows); err != nil {
		t.Fatal(err)
	}
	if got := tr.RelationSupport(0); !slices.Equal(got, []int{0, 1, 2}) {
		t.Fatalf("relation mode %v, want [0 1 2]", got)
	}
	u := &Unit{tr: tr, names: []string{"a", "b", "c", "d", "e"}, stats: configs.Statistics{T2: true, SPE: true, Relation: true}, scale: 1}
	x := frame()
	x[2] += 0.2
	if err := tr.Evaluate(&u.score, x, nil); err != nil {
		t.Fatal(err)
	}
	s := &u.score
	if !(s.Relation > s.RelationLimit) {
		t.Fatalf("relation statistic %v under its limit %v", s.Relation, s.RelationLimit)
	}
	o := &alerts.Observation{Contributors: []alerts.Contributor{{Channel: "d", RBC: 9}, {Channel: "c", RBC: 5}}}
	u.leadRelation(o, s)
	var got []string
	for _, c := range o.Contributors {
		got = append(got, c.Channel)
	}
	if !slices.Equal(got, []string{"a", "b", "c", "d"}) || o.Contributors[2].RBC != 5 {
		t.Errorf("contributors %v (c's RBC %v), want a, b, c (RBC 5), d", got, o.Contributors[2].RBC)
	}
}
