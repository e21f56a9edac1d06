package evaluate

import (
	"testing"
	"time"
)

// TestComputeEdges adds edge cases to TestCompute and checks the
// per-episode matches the report shows. Every expected value is counted by
// hand from the definitions in the doc comment of Compute (issue 6).
func TestComputeEdges(t *testing.T) {
	day := 24 * time.Hour
	type match struct {
		alert    string
		delayS   float64 // ignored when alert is ""
		isolated bool
	}
	cases := []struct {
		name      string
		alerts    []Alert
		episodes  []Episode
		span      time.Duration
		detected  int
		falseN    int
		isolated  int
		rate      *float64 // nil: undefined
		median    *float64
		perDay    *float64
		matches   []match
		zeroGrace bool
	}{
		{
			name: "no alerts and no episodes: every rate but the false-alert rate is undefined",
			span: day, perDay: ptr(0),
		},
		{
			name:   "no span: no per-day rate",
			alerts: []Alert{al("x", 10, "a")},
			falseN: 1,
		},
		{
			name: "an alert spanning two episodes, and a second alert inside the second",
			// "long" starts in e1 (at +5 min) and is still active through
			// e2; "again" starts in e2 at +20 min and detects it.
			alerts:   []Alert{al("again", 145, "q", "r", "s", "b"), al("long", 65, "a")},
			episodes: []Episode{ep("e1", 60, 120, "a"), ep("e2", 125, 180, "b")},
			span:     day,
			detected: 2, isolated: 1, rate: ptr(1), median: ptr((300 + 1200) / 2.0), perDay: ptr(0),
			matches: []match{{"long", 300, true}, {"again", 1200, false}},
		},
		{
			name: "overlapping episodes: the first alert of each is its own",
			// a1 at 70 is inside e1 only; a2 at 100 is inside both, but e1
			// already has a1, so a2 is e2's first alert.
			alerts:   []Alert{al("a1", 70, "z"), al("a2", 100, "b")},
			episodes: []Episode{ep("e1", 60, 120, "a"), ep("e2", 90, 150, "b")},
			span:     day,
			detected: 2, isolated: 1, rate: ptr(1), median: ptr((600 + 600) / 2.0), perDay: ptr(0),
			matches: []match{{"a1", 600, false}, {"a2", 600, true}},
		},
		{
			name: "alerts before an episode are false or within grace, never detections",
			// b1 30 min before e1 starts: false; b2 10 min before: within
			// the 15 min grace, not false, and not a detection either.
			alerts:   []Alert{al("b1", 30, "a"), al("b2", 50, "a")},
			episodes: []Episode{ep("e1", 60, 120, "a")},
			span:     2 * day,
			falseN:   1, rate: ptr(0), perDay: ptr(0.5),
			matches: []match{{}},
		},
		{
			name:     "zero grace: an alert one minute after the end is false",
			alerts:   []Alert{al("late", 121, "a")},
			episodes: []Episode{ep("e1", 60, 120, "a")},
			span:     day, zeroGrace: true,
			falseN: 1, rate: ptr(0), perDay: ptr(1),
			matches: []match{{}},
		},
		{
			name:     "a data-quality alert naming only the faulty channel isolates it",
			alerts:   []Alert{al("q", 61, "a")},
			episodes: []Episode{ep("e1", 60, 120, "a")},
			span:     day,
			detected: 1, isolated: 1, rate: ptr(1), median: ptr(60), perDay: ptr(0),
			matches: []match{{"q", 60, true}},
		},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			grace := DefaultGrace
			if tc.zeroGrace {
				grace = 0
			}
			got := Compute(tc.alerts, tc.episodes, oneUnit(tc.span, grace))
			checkMetrics(t, got, Metrics{Episodes: len(tc.episodes), Detected: tc.detected, FalseAlerts: tc.falseN, IsolatedTop3: tc.isolated,
				DetectionRate: tc.rate, MedianDelayS: tc.median, FalseAlertsPerDay: tc.perDay})
			if len(got.Matches) != len(tc.episodes) {
				t.Fatalf("%d matches for %d episodes", len(got.Matches), len(tc.episodes))
			}
			for i, w := range tc.matches {
				m := got.Matches[i]
				if m.Episode != tc.episodes[i].ID || m.Alert != w.alert || m.Isolated != w.isolated {
					t.Errorf("match %d: %+v, want alert %q isolated %v", i, m, w.alert, w.isolated)
				}
				if (m.DelayS == nil) != (w.alert == "") || (m.DelayS != nil && *m.DelayS != w.delayS) {
					t.Errorf("match %d: delay %v, want %v", i, m.DelayS, w.delayS)
				}
			}
		})
	}
}
