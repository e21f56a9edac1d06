package pipeline

import (
	"math"
	"time"

	"modewatch/configs"
	"modewatch/stream"
)

// Staleness returns the staleness limit of the pipeline's frames (the
// configured one, or the aligner's default): a channel without a reading
// for longer is missing, and a unit whose channels are all missing is
// silent.
func (p *Pipeline) Staleness() time.Duration { return p.stale }

// staleness reads the aligner's staleness limit for the configuration.
func staleness(cfg *configs.Config, period time.Duration) time.Duration {
	a, err := stream.NewAligner(AlignConfig(cfg.Frames, period), 0, nil)
	if err != nil {
		return 3 * period // the configuration was validated before; not reached
	}
	return a.Config().Staleness
}

// ClockJump is the intake's OnClockJump handler: the input fell silent
// from from (its newest reading before the gap) to to, longer than the
// clock-jump limit, so the aligner forms no frames in between. Every unit
// that has scored frames is told it went silent at from + staleness, by
// frame time, as the frames of a shorter gap would have shown it; the
// first frame after the gap closes the alert.
func (p *Pipeline) ClockJump(from, to time.Time, _ int) {
	t := from.Add(p.Staleness())
	if !t.Before(to) {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, u := range p.units {
		if u.screen == nil || len(u.x) == 0 || u.tr == nil || u.lastT.IsZero() || !t.After(u.lastT) {
			continue // no frame in this run yet (a unit restored from a checkpoint waits for its first)
		}
		u.screen.Step(nanFrame(u.x, u.miss), u.miss)
		u.observeSilent(t)
	}
}

// nanFrame marks every value of x missing and returns it.
func nanFrame(x []float64, miss []bool) []float64 {
	for k := range x {
		x[k], miss[k] = math.NaN(), true
	}
	return x
}
