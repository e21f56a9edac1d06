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
	e.stepQuality(u, QualitySilent, unit, true, t, &Observation{Unit: unit, Time: t}, nil)
	e.endTimers(u, t)
	return true
}

// SilenceUnseen is [Engine.Silence] for a unit that has had no frame in
// this run: a unit the service knows from its configuration, model file or
// checkpoint whose gateway has sent nothing since start-up. The live
// service calls it once the run is older than the staleness limit, with t
// its best estimate of the plant's frame time. It raises (or keeps) the
// unit's silent condition at t; the unit's first frame, whatever its time,
// closes it (at the alert's start at the earliest). A unit that has frames
// is handled as by Silence; a unit in maintenance changes nothing.
func (e *Engine) SilenceUnseen(unit string, t time.Time) bool {
	if unit == "" || t.IsZero() {
		return false
	}
	e.mu.Lock()
	u := e.units[unit]
	if u != nil && u.seen {
		e.mu.Unlock()
		return e.Silence(unit, t)
	}
	defer e.mu.Unlock()
	u = e.unit(unit)
	if u.maint || !t.After(u.tick) && !u.tick.IsZero() {
		return false
	}
	e.startTimers(u, t)
	u.seq++
	e.stepQuality(u, QualitySilent, unit, true, t, &Observation{Unit: unit, Time: t}, nil)
	e.endTimers(u, t)
	return true
}
