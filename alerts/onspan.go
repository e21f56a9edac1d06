package alerts

import (
	"math"
	"time"
)

// DefaultOnSpan is the least plant time the default on-delay window spans
// (configs alerts.on_span): 50 s, the window of the default rule
// (DefaultOnCount of DefaultOnWindow frames) at 10 s frames. At shorter
// frame periods a window of DefaultOnWindow frames lasts only seconds,
// and a few stray frames within it (a quantised, nearly constant channel
// stepping by one quantum now and then) open an alarm; the false-
// alert budget then raises every limit of the unit to keep such blips
// out, blinding it to slow faults. Chosen on the realism suite (its only
// plant below 10 s frames, at 5 s, detected its discharge drift with a
// window of 8 and 10 frames, not 6 or 12; README, Validation).
const DefaultOnSpan = 50 * time.Second

// SpanOnDelay widens the on-delay "n of the last m frames" so that its
// window spans at least span of plant time at frame period period: m
// grows to ⌈span/period⌉ (at most 64, the alarm's window) and n in proportion,
// ⌈n·m′/m⌉, so that the share of frames that must be over the limit is
// kept. A window already as long, or span ≤ 0, is left as it is.
func SpanOnDelay(n, m int, period, span time.Duration) (int, int) {
	if span <= 0 || period <= 0 || n < 1 || m < n {
		return n, m
	}
	want := int(math.Ceil(float64(span) / float64(period)))
	want = min(want, MaxOnWindow)
	if want <= m {
		return n, m
	}
	n2 := int(math.Ceil(float64(n) * float64(want) / float64(m)))
	return min(max(n2, 1), want), want
}
