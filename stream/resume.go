package stream

import (
	"fmt"
	"time"
)

// ResumeAt makes the first frame the aligner emits the one whose time
// (Frame.Start) is at or after t, so that an aligner started afresh after
// a checkpoint whose last frame was at T (ResumeAt(T + Period)) emits the
// frames right after it even when they hold only readings carried from
// before it (see Seed), as an uninterrupted run would. Without it the first frame is that
// of the first reading. Readings before t still extend the segment
// backwards until the first emission (the caller skips frames it scored
// already). It must be called before the first reading (else ErrSeedLate).
func (a *Aligner) ResumeAt(t time.Time) error {
	if a.started {
		return ErrSeedLate
	}
	if t.Before(MinTime) || t.After(MaxTime) {
		return fmt.Errorf("stream: resume at %s: %w", t.Format(time.RFC3339Nano), ErrTimeRange)
	}
	k := floorDiv(t.UnixNano()+a.per-1, a.per) // the frame at or after t
	a.started = true
	a.next, a.maxK, a.tmax = k, k, a.end(k)-a.per
	return nil
}

// ResumeAt is Aligner.ResumeAt for the intake's aligner; call it before
// the first Feed or Read.
func (in *Intake) ResumeAt(t time.Time) error {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		return ErrNoPeriod
	}
	return in.al.ResumeAt(t)
}
