package alerts

import (
	"testing"
	"time"
)

// TestSpanOnDelay: the window grows to the span at short frame periods,
// N in proportion (rounded up, so the share of frames over the limit is
// never lowered), capped at the 64 frames an Alarm keeps; longer periods
// and a zero span keep the rule.
func TestSpanOnDelay(t *testing.T) {
	for _, c := range []struct {
		n, m         int
		period, span time.Duration
		wn, wm       int
	}{
		{3, 5, 5 * time.Second, 50 * time.Second, 6, 10},
		{3, 5, 10 * time.Second, 50 * time.Second, 3, 5},
		{3, 5, 20 * time.Second, 50 * time.Second, 3, 5},
		{3, 5, time.Minute, 50 * time.Second, 3, 5},
		{3, 5, 4 * time.Second, 50 * time.Second, 8, 13}, // ⌈50/4⌉ = 13, ⌈3·13/5⌉ = 8
		{3, 5, time.Second, 50 * time.Second, 30, 50},
		{3, 5, 100 * time.Millisecond, 50 * time.Second, 39, 64},
		{1, 1, 5 * time.Second, 50 * time.Second, 10, 10},
		{3, 5, 5 * time.Second, 0, 3, 5},
		{3, 5, 0, 50 * time.Second, 3, 5},
	} {
		n, m := SpanOnDelay(c.n, c.m, c.period, c.span)
		if n != c.wn || m != c.wm {
			t.Errorf("SpanOnDelay(%d, %d, %v, %v) = %d/%d, want %d/%d", c.n, c.m, c.period, c.span, n, m, c.wn, c.wm)
		}
		_ = NewAlarm(AlarmRule{N: n, M: m}) // panics on a rule an Alarm cannot keep
	}
}
