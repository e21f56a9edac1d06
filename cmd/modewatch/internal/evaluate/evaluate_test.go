package evaluate

import (
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
)

var t0 = time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)

func at(min float64) time.Time { return t0.Add(time.Duration(min * float64(time.Minute))) }

func ep(id string, from, to float64, ch ...string) Episode {
	return Episode{ID: id, Start: at(from), End: at(to), Kind: "bias", Channels: ch}
}

// al is an alert of unit "u", the one unit of the cases that name bare
// channels (see oneUnit).
func al(id string, start float64, top ...string) Alert {
	return Alert{ID: id, Unit: "u", Start: at(start), Top: top}
}

// oneUnit is a run from t0 over span in which every channel belongs to
// unit "u".
func oneUnit(span, grace time.Duration) Run {
	r := Run{Grace: grace, UnitOf: func(string) string { return "u" }}
	if span > 0 {
		r.From, r.To = t0, t0.Add(span)
	}
	return r
}

func ptr(f float64) *float64 { return &f }

// TestCompute checks the metrics on small hand-made sets; every expected
// value is counted by hand from the definitions in issue 6 (quoted in the
// doc comment of Compute).
func TestCompute(t *testing.T) {
	day := 24 * time.Hour
	cases := []struct {
		name     string
		alerts   []Alert
		episodes []Episode
		span     time.Duration
		want     Metrics
	}{
		{
			name:     "no alerts",
			episodes: []Episode{ep("e1", 60, 120, "a")},
			span:     day,
			want:     Metrics{Episodes: 1, DetectionRate: ptr(0), FalseAlertsPerDay: ptr(0)},
		},
		{
			name:   "no episodes: every alert is false",
			alerts: []Alert{al("x", 10, "a"), al("y", 500, "b")},
			span:   2 * day,
			// 2 false alerts over 2 days = 1 per day; no rate without episodes.
			want: Metrics{FalseAlerts: 2, FalseAlertsPerDay: ptr(1)},
		},
		{
			name: "detection, delay, isolation and grace",
			alerts: []Alert{
				al("a1", 70, "p", "q", "a"),       // inside e1 at +10 min; "a" third: isolated
				al("a2", 75, "a"),                 // later alert inside e1: not the first
				al("a3", 130, "z"),                // 10 min after e1 end: within the 15 min grace, not false
				al("a4", 140, "z"),                // 20 min after e1 end: false
				al("a5", 300, "w", "x", "y", "b"), // inside e2 at +60 min; "b" fourth: not isolated
				al("a6", 44, "z"),                 // 16 min before e1: false
				al("a7", 46, "z"),                 // 14 min before e1: within grace
			},
			episodes: []Episode{ep("e1", 60, 120, "a"), ep("e2", 240, 360, "b"), ep("e3", 600, 700, "c")},
			span:     day,
			// delays 600 s and 3600 s: median (600 + 3600)/2 = 2100 s.
			want: Metrics{Episodes: 3, Detected: 2, DetectionRate: ptr(2.0 / 3), MedianDelayS: ptr(2100),
				FalseAlerts: 2, FalseAlertsPerDay: ptr(2), IsolatedTop3: 1},
		},
		{
			name: "alert at the exact start and end counts",
			alerts: []Alert{
				al("s", 60, "a"),
				al("e", 200, "x"),
			},
			episodes: []Episode{ep("e1", 60, 120, "a"), ep("e2", 180, 200, "b")},
			span:     day / 2,
			want: Metrics{Episodes: 2, Detected: 2, DetectionRate: ptr(1), MedianDelayS: ptr(600),
				FalseAlertsPerDay: ptr(0), IsolatedTop3: 1},
		},
		{
			name:     "overlapping episodes: one alert detects both",
			alerts:   []Alert{al("o", 100, "b")},
			episodes: []Episode{ep("e1", 60, 120, "a"), ep("e2", 90, 150, "b")},
			span:     day,
			// delays 40 min and 10 min: median 25 min = 1500 s.
			want: Metrics{Episodes: 2, Detected: 2, DetectionRate: ptr(1), MedianDelayS: ptr(1500),
				FalseAlertsPerDay: ptr(0), IsolatedTop3: 1},
		},
		{
			name: "an alert spanning two episodes detects only the one it starts in",
			// The alert starts in e1 and is still active during e2; only its
			// start matters.
			alerts:   []Alert{al("long", 65, "a")},
			episodes: []Episode{ep("e1", 60, 120, "a"), ep("e2", 125, 180, "a")},
			span:     day,
			want: Metrics{Episodes: 2, Detected: 1, DetectionRate: ptr(0.5), MedianDelayS: ptr(300),
				FalseAlertsPerDay: ptr(0), IsolatedTop3: 1},
		},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			checkMetrics(t, Compute(tc.alerts, tc.episodes, oneUnit(tc.span, DefaultGrace)), tc.want)
		})
	}
}

// checkMetrics compares the counts of got with want's, and its rates
// within 1e-12 (absolute or relative), where a missing rate (nil) must be
// missing in both.
func checkMetrics(t *testing.T, got, want Metrics) {
	t.Helper()
	if got.Episodes != want.Episodes || got.Detected != want.Detected || got.FalseAlerts != want.FalseAlerts || got.IsolatedTop3 != want.IsolatedTop3 {
		t.Errorf("counts: got episodes %d detected %d false %d isolated %d, want %d %d %d %d",
			got.Episodes, got.Detected, got.FalseAlerts, got.IsolatedTop3, want.Episodes, want.Detected, want.FalseAlerts, want.IsolatedTop3)
	}
	for _, f := range []struct {
		name      string
		got, want *float64
	}{
		{"detection_rate", got.DetectionRate, want.DetectionRate},
		{"median_delay_s", got.MedianDelayS, want.MedianDelayS},
		{"false_alerts_per_day", got.FalseAlertsPerDay, want.FalseAlertsPerDay},
	} {
		switch {
		case (f.got == nil) != (f.want == nil):
			t.Errorf("%s: got %v, want %v", f.name, f.got, f.want)
		case f.got != nil && !scalar.EqualWithinAbsOrRel(*f.got, *f.want, 1e-12, 1e-12):
			t.Errorf("%s: got %g, want %g", f.name, *f.got, *f.want)
		}
	}
}

func TestDecodeTruth(t *testing.T) {
	good := `{"episodes":[{"id":"f1","start":"2026-03-01T01:00:00Z","end":"2026-03-01T02:00:00Z","kind":"bias","channels":["coolwater.pump2.flow"]}]}`
	tr, err := DecodeTruth(strings.NewReader(good))
	if err != nil || len(tr.Episodes) != 1 || tr.Episodes[0].End.Sub(tr.Episodes[0].Start) != time.Hour {
		t.Fatalf("got %+v, %v", tr, err)
	}
	for _, bad := range []string{
		`{"episodes":[{"id":"f1","start":"2026-03-01T02:00:00Z","end":"2026-03-01T01:00:00Z"}]}`,
		`{"episodes":[{"start":"2026-03-01T01:00:00Z","end":"2026-03-01T02:00:00Z"}]}`,
		`{"episodes":[{"id":"f1","start":"yesterday"}]}`,
		`{"episodes":[{"id":"f1","begin":"2026-03-01T01:00:00Z"}]}`,
		`{"episodes": [`,
	} {
		if _, err := DecodeTruth(strings.NewReader(bad)); err == nil {
			t.Errorf("accepted %s", bad)
		}
	}
}
