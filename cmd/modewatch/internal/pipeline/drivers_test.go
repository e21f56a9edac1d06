package pipeline

import (
	"math"
	"testing"
)

// TestDriversCheckpoint: a unit with its setpoint as driver (spPlant, the
// setpoint moved and held in the second half), stopped after half a day,
// checkpointed and restored, scores the rest bit for bit as an
// uninterrupted run: the regression and its slope test's statistics
// (driver_lags) come back, so the refits after the restart keep and drop
// the same slopes.
func TestDriversCheckpoint(t *testing.T) {
	const day = 8640
	move := func(k int) float64 { return 0.4 * math.Min(1, math.Max(0, float64(k-6000)/90)) }
	cfg := sConfig(t, "units: [{name: sup, context: [sup.a.sp]}]\n")
	ch, frames := collectFrames(t, spPlant(0, day, move, nil, 3), sPeriod)
	restartMatches(t, cfg, ch, sPeriod, frames, day/2, nil)
	p, err := New(Options{Config: cfg, Channels: ch, Period: sPeriod})
	if err != nil {
		t.Fatal(err)
	}
	runFrames(t, p, frames[:day/2], nil)
	ck, err := p.CheckpointUnit("sup")
	if err != nil {
		t.Fatal(err)
	}
	if u := ck.Units[0]; len(u.DriverSlopes) != 4 || len(u.DriverLags) == 0 {
		t.Fatalf("checkpoint holds %d driver slopes and %d lag statistics", len(u.DriverSlopes), len(u.DriverLags))
	}
}
