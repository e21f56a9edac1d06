package alerts

import (
	"slices"
	"testing"
	"time"
)

// TestRecordRanksOverLimitFirst: a record lists the contributors over
// their own control limit first, then the others by RBC as the
// observation ranks them, and keeps MaxContributors of them. A channel is
// significant when its contribution exceeds its own control limit
// (Alcalá & Qin 2009, the limit of each RBC; common practice for
// contribution plots, Westerhuis, Gurden & Smilde 2000, from memory): a
// tightly held channel that drifted (a small RBC, far over its small
// limit) is named before loosely held channels that wander with larger
// RBC under their limits. The channels over their limits are ranked by
// their summed excess over the incident, Σ(RBC/limit − 1) (excess.go):
// with the same frame repeated, by RBC/limit, so "d" (2 over a limit of
// 1) comes before "c" (3 over 2). Invented values.
func TestRecordRanksOverLimitFirst(t *testing.T) {
	for _, tc := range []struct {
		name string
		in   []Contributor
		max  int
		want []string
	}{
		{"a drifted tight relation", []Contributor{
			{Channel: "basin", RBC: 0.47, Limit: 0.67}, {Channel: "bearing", RBC: 0.23, Limit: 0.69},
			{Channel: "supply", RBC: 0.17, Limit: 0.11}, {Channel: "fan", RBC: 0.16, Limit: 0.52},
			{Channel: "makeup", RBC: 0.14, Limit: 0.36}}, 5, []string{"supply", "basin", "bearing", "fan", "makeup"}},
		{"two over, by RBC", []Contributor{
			{Channel: "a", RBC: 5, Limit: 1}, {Channel: "b", RBC: 4, Limit: 9}, {Channel: "c", RBC: 3, Limit: 2},
			{Channel: "d", RBC: 2, Limit: 1}}, 3, []string{"a", "d", "c"}},
		{"none over: RBC order", []Contributor{
			{Channel: "a", RBC: 5, Limit: 6}, {Channel: "b", RBC: 4, Limit: 9}, {Channel: "c", RBC: 3}}, 5, []string{"a", "b", "c"}},
	} {
		var got []*Record
		e, err := NewEngine(Config{MaxContributors: tc.max}, PublisherFunc(func(r *Record) { got = append(got, r) }), nil, nil)
		if err != nil {
			t.Fatal(err)
		}
		t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
		for k := 0; k < 10; k++ {
			o := &Observation{Unit: "u", Time: t0.Add(time.Duration(k) * time.Minute), ModelState: ModelAdapting,
				Stats: []Stat{{Name: StatT2, Value: 30, Limit: 10}}, Contributors: tc.in}
			if err := e.Observe(o); err != nil {
				t.Fatal(err)
			}
		}
		if len(got) == 0 {
			t.Fatalf("%s: no record", tc.name)
		}
		r := got[len(got)-1]
		validateRecord(t, r)
		var names []string
		for i, c := range r.Contributors {
			names = append(names, c.Channel)
			if c.Rank != i+1 {
				t.Errorf("%s: %s has rank %d at place %d", tc.name, c.Channel, c.Rank, i+1)
			}
		}
		if !slices.Equal(names, tc.want) {
			t.Errorf("%s: contributors %v, want %v", tc.name, names, tc.want)
		}
	}
}
