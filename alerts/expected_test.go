package alerts

import (
	"encoding/json"
	"math"
	"testing"
	"time"
)

func TestExpectation(t *testing.T) {
	nan := Number(math.NaN())
	for _, tc := range []struct {
		c    RecordContributor
		want string
	}{
		{RecordContributor{Channel: "pump02.flow", Reading: 71.23, Expected: 64.04, Band: 1.1}, "pump02.flow reads 71.2, expected 64.0 ± 1.1"},
		{RecordContributor{Channel: "dryer.temp", Reading: 0.51234, Expected: 0.4981, Band: 0.012}, "dryer.temp reads 0.512, expected 0.498 ± 0.012"},
		{RecordContributor{Channel: "kiln.rpm", Reading: 1234.4, Expected: 1180.2, Band: 35}, "kiln.rpm reads 1234, expected 1180 ± 35"},
		{RecordContributor{Channel: "a", Reading: 3, Expected: nan, Band: nan}, "a reads 3.00"},
		{RecordContributor{Channel: "a", Reading: nan, Expected: nan, Band: nan}, "a"},
	} {
		if got := tc.c.Expectation(); got != tc.want {
			t.Errorf("%+v: got %q, want %q", tc.c, got, tc.want)
		}
	}
}

// TestRecordExpected: the record carries the reading, expected value and
// band of each contributor at the peak, null where unknown, and stays
// valid under the schema.
func TestRecordExpected(t *testing.T) {
	var got []*Record
	e, err := NewEngine(Config{}, PublisherFunc(func(r *Record) { got = append(got, r) }), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	for k := 0; k < 10; k++ {
		o := &Observation{Unit: "u", Time: t0.Add(time.Duration(k) * time.Minute), ModelState: ModelAdapting,
			Stats: []Stat{{Name: StatT2, Value: 30, Limit: 10}, {Name: StatSPE, Value: 1, Limit: 10}},
			Contributors: []Contributor{
				{Channel: "a", Share: 0.8, RBC: 20, Limit: 6, Reading: 71.2, Expected: 64, Band: 1.1, BandCoverage: 0.95},
				{Channel: "b", Share: 0.1, RBC: 2, Limit: 6, Reading: 5, Expected: math.NaN(), Band: math.NaN(), BandCoverage: 0.95},
				{Channel: "c", Share: 0.1, RBC: 2, Limit: 6},
			}}
		if err := e.Observe(o); err != nil {
			t.Fatal(err)
		}
	}
	if len(got) == 0 {
		t.Fatal("no record")
	}
	r := got[len(got)-1]
	validateRecord(t, r)
	if s := r.Contributors[0].Expectation(); s != "a reads 71.2, expected 64.0 ± 1.1" {
		t.Errorf("first contributor: %q", s)
	}
	data, _ := json.Marshal(r.Contributors)
	want := `[{"rank":1,"channel":"a","share":0.8,"rbc":20,"rbc_limit":6,"modes":[],"reading":71.2,"expected":64,"band":1.1,"band_coverage":0.95},` +
		`{"rank":2,"channel":"b","share":0.1,"rbc":2,"rbc_limit":6,"modes":[],"reading":5,"expected":null,"band":null},` +
		`{"rank":3,"channel":"c","share":0.1,"rbc":2,"rbc_limit":6,"modes":[],"reading":null,"expected":null,"band":null}]`
	if string(data) != want {
		t.Errorf("contributors\n got %s\nwant %s", data, want)
	}
	var back []RecordContributor
	if err := json.Unmarshal(data, &back); err != nil || back[0].Expected != 64 || back[1].Expected.Known() {
		t.Errorf("round trip: %v %+v", err, back)
	}
}

// Describe names a data-quality record's kind and channel and, for a level
// shift with its size, the windows' means and the unexplained step with
// digits from the step's size; a level with an unknown value names only
// the kind and channel. Invented values.
func TestQualityDescribe(t *testing.T) {
	lv := func(b, a, s float64) *LevelStep {
		return &LevelStep{Before: Number(b), After: Number(a), Step: Number(s), Window: Duration(5 * time.Minute)}
	}
	for _, tc := range []struct {
		q    RecordQuality
		want string
	}{
		{RecordQuality{Kind: QualityStuck, Channel: "u.a.x"}, "stuck u.a.x"},
		{RecordQuality{Kind: QualityLevelShift, Channel: "air.header.pressure", Level: lv(6.8, 7.2, 0.38)},
			"level_shift air.header.pressure: 6.80 → 7.20 (means over 5m0s before and after), 0.38 not explained by the other channels"},
		{RecordQuality{Kind: QualityLevelShift, Channel: "p.flow", Level: lv(412.3, 431.9, -18.4)},
			"level_shift p.flow: 412 → 432 (means over 5m0s before and after), -18 not explained by the other channels"},
		{RecordQuality{Kind: QualityLevelShift, Channel: "p.flow", Level: lv(412.3, math.NaN(), 3)}, "level_shift p.flow"},
	} {
		if got := tc.q.Describe(); got != tc.want {
			t.Errorf("got  %q\nwant %q", got, tc.want)
		}
	}
}
