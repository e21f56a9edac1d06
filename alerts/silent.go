package alerts

import "time"

// Silence raises (or keeps) the silent data-quality condition of unit at
// t without a frame: the live service calls it when no reading of the unit
// has arrived for longer than the staleness limit by the wall clock, so a
// gateway that goes quiet is reported while its frames have stopped (the
// frames that would show it are never formed). Like [Engine.Tick] it runs
// the timers of t first and does not move the unit's last frame time; the
// unit's next frame closes the alert when it carries a reading (its
// Observation does not name the unit silent). t at or before the unit's
// last frame, a unit without frames and a unit in maintenance change
// nothing; Silence reports whether the condition was stepped.
func (e *Engine) Silence(unit string, t time.Time) bool {
	e.mu.Lock()
	defer e.mu.Unlock()
	u := e.units[unit]
	if u == nil || !u.seen || u.maint || !t.After(u.last) {
		return false
	}
	if t.After(u.tick) {
		e.startTimers(u, t)
	}
	// A fresh sequence number marks the condition present for this step
	// only; the next Observe (u.seq+1) steps it absent unless named again.
	u.seq++
	e.stepQuality(u, QualitySilent, unit, true, t, &Observation{Unit: unit, Time: t})
	e.endTimers(u, t)
	return true
}
