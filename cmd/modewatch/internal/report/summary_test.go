package report

import (
	"fmt"
	"testing"
)

// TestGroupSummary: the figures of replay --json come out labelled,
// rounded and grouped by meaning; unknown figures keep their key.
func TestGroupSummary(t *testing.T) {
	flat, err := flatten(map[string]any{
		"frames": 1234567, "elapsed_s": 0.19762079, "frames_per_second": 61234.5678,
		"period_inferred": true,
		"lines":           map[string]any{"accepted": 12, "rejected_by_reason": map[string]any{"no_time": 3}},
		"metrics":         map[string]any{"detection_rate": 0.857142857, "median_delay_s": 5400.4},
		"new_figure":      2.5,
	})
	if err != nil {
		t.Fatal(err)
	}
	got := fmt.Sprint(groupSummary(flat))
	want := "[{Run [{period inferred from the data yes} {frames 1\u202f234\u202f567} {replay time 200ms} {frames per second 61\u202f235}]} " +
		"{Input lines [{accepted 12} {rejected: no timestamp 3}]} " +
		"{Against the labelled episodes [{detection rate 85.7 %} {median delay 1h30m0s}]} " +
		"{Other figures [{new_figure 2.5}]}]"
	if got != want {
		t.Errorf("groups\n got %s\nwant %s", got, want)
	}
}
