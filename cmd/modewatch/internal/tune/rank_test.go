package tune

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"strings"
	"sync/atomic"
	"testing"

	"modewatch/cmd/modewatch/internal/evaluate"
)

func f(v float64) *float64 { return &v }

func result(i int, episodes, detected int, perDay float64, delay *float64, isolated int) Result {
	m := evaluate.Metrics{Episodes: episodes, Detected: detected, FalseAlertsPerDay: f(perDay), MedianDelayS: delay, IsolatedTop3: isolated}
	if episodes > 0 {
		m.DetectionRate = f(float64(detected) / float64(episodes))
	}
	return Result{Setting: Setting{Index: i, Keys: []string{"alpha"}, Texts: []string{string(rune('a' + i))}}, Metrics: m}
}

// TestRank checks the ranking rule and the Pareto front on six hand-made
// results; the expected order and front are worked out by hand from
// RankRule (comments give the deciding key).
func TestRank(t *testing.T) {
	in := []Result{
		result(0, 5, 5, 2.0, f(600), 3),  // A: detects all, over the budget of 1/day
		result(1, 5, 4, 0.5, f(1200), 2), // B
		result(2, 5, 4, 0.5, f(900), 2),  // C: as B but faster, so it dominates B
		result(3, 5, 5, 0.9, f(1800), 1), // D: detects all within the budget
		{Setting: Setting{Index: 4, Keys: []string{"alpha"}, Texts: []string{"e"}}, Err: "boom"}, // E: failed
		result(5, 5, 0, 0, nil, 0), // F: silent
	}
	ranked := Rank(in, 1)
	// Within budget first (D, C, B, F), by detection (D), then isolation
	// (C = B), then delay (C before B); then over budget (A); failed last.
	var order, front []string
	for _, r := range ranked {
		order = append(order, r.Setting.Texts[0])
		if r.Pareto {
			front = append(front, r.Setting.Texts[0])
		}
	}
	if got := strings.Join(order, ""); got != "dcbfae" {
		t.Errorf("order %s, want dcbfae", got)
	}
	// B is dominated by C; E failed. A (best delay and isolation), D
	// (best detection within budget), C and F (no false alerts) are not
	// dominated.
	if got := strings.Join(front, ""); got != "dcfa" {
		t.Errorf("front %s, want dcfa", got)
	}
	for i, r := range ranked {
		if r.Rank != i+1 {
			t.Errorf("rank %d at %d", r.Rank, i)
		}
	}
	if !Meets(&ranked[0], 1) || Meets(&ranked[4], 1) || Meets(&ranked[1], 1) {
		t.Error("Meets: only D detects every episode within 1 false alert a day")
	}

	var tb, cb bytes.Buffer
	if err := WriteTable(&tb, ranked, 3); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(tb.String()), "\n")
	if len(lines) != 5 || !strings.HasPrefix(lines[1], "1     *       d") || !strings.Contains(lines[4], "3 more") {
		t.Errorf("table:\n%s", tb.String())
	}
	if err := WriteCSV(&cb, ranked); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&cb).ReadAll()
	if err != nil || len(recs) != 7 || recs[6][len(recs[6])-1] != "boom" || recs[1][0] != "1" || recs[1][1] != "true" {
		t.Errorf("csv %v %v", recs, err)
	}
}

// TestRun checks that Run keeps grid order with several workers, runs
// every setting once, and stops on cancellation.
func TestRun(t *testing.T) {
	g, err := ParseGrid("g", []byte("alpha: [0.01, 0.02, 0.03]\non_delay: [\"1/1\", \"2/3\", \"3/5\"]\n"))
	if err != nil {
		t.Fatal(err)
	}
	var calls atomic.Int32
	eval := func(ctx context.Context, s Setting) Result {
		calls.Add(1)
		return Result{Frames: uint64(s.Index)}
	}
	var done int
	out, err := Run(context.Background(), g.Settings(), 4, eval, func(Result) { done++ })
	if err != nil || len(out) != 9 || calls.Load() != 9 || done != 9 {
		t.Fatalf("%d results, %d calls, %d done, %v", len(out), calls.Load(), done, err)
	}
	for i, r := range out {
		if r.Frames != uint64(i) || r.Setting.Index != i {
			t.Errorf("result %d holds setting %d", i, r.Setting.Index)
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	out, err = Run(ctx, g.Settings(), 2, eval, nil)
	if !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled run: %v", err)
	}
	for _, r := range out {
		if r.Err == "" && r.Frames == 0 && r.Setting.Index != 0 {
			t.Errorf("setting %d neither run nor marked", r.Setting.Index)
		}
	}
}
