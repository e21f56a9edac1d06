package pipeline

import (
	"slices"

	"modewatch/stream"
	"modewatch/tracker"
)

// Drivers from other units. A unit's context channels (units[].context,
// or the model file it was fitted into) are channels of other units that
// drive it. They join the unit's model like its own channels; each frame
// is then scored with their explained part removed (tracker.Drivers), so
// that a driver moving the unit raises nothing in it; they are never named
// as contributors, and their data quality is their own unit's business.
// Each frame learned also feeds the regression's slope test
// (tracker.Drivers.Observe; its level is model.driver_level), whose
// statistics a checkpoint saves beside the slopes (driver_lags).

// contextOf returns the context channel names of the configured unit name.
func (p *Pipeline) contextOf(name string) []string {
	if i := p.cfg.Unit(name); i >= 0 {
		return p.cfg.Units[i].Context
	}
	return nil
}

// assignContext gives registry channel i (owned by owner, possibly nil) to
// every unit that takes it as a context channel. Called under p.mu.
func (p *Pipeline) assignContext(i int, c stream.Channel, owner *Unit) {
	for k := range p.cfg.Units {
		cu := &p.cfg.Units[k]
		if slices.Contains(cu.Context, c.Name) && p.byName[cu.Name] == nil {
			p.newUnit(cu.Name)
		}
	}
	for _, u := range p.units {
		if u == owner || !slices.Contains(u.context, c.Name) {
			continue
		}
		u.addChannel(i, c.Name)
	}
}

// isContext reports whether model channel k of the unit is a context
// channel.
func (u *Unit) isContext(k int) bool { return k < len(u.ctx) && u.ctx[k] }

// syncContext updates the per-channel context flags, the screen's and the
// drivers after the unit's channels changed. It allocates only then.
func (u *Unit) syncContext() {
	if len(u.context) == 0 || len(u.ctx) == len(u.names) {
		return
	}
	u.ctx = u.ctx[:0]
	n := 0
	for _, name := range u.names {
		c := slices.Contains(u.context, name)
		u.ctx = append(u.ctx, c)
		if c {
			n++
		}
	}
	u.nCtx = n
	u.drivers = nil
	if n > 0 && n < len(u.names) {
		u.drivers = map[*tracker.Tracker]*tracker.Drivers{}
		u.adj = make([]float64, len(u.names))
	}
}

// ownObserved counts the unit's own channels present in the frame just
// read (context channels do not keep a unit from being silent).
func (u *Unit) ownObserved() int {
	n := 0
	for k, m := range u.miss {
		if !m && !u.isContext(k) {
			n++
		}
	}
	return n
}

// scoreDrivers rescores the frame just stepped with its context channels'
// part removed, by the regression of the current model (state), refitted
// when the model was refreshed. It allocates only when a model gets its
// regression.
func (u *Unit) scoreDrivers(refreshed bool) {
	if !u.score.Ready || u.tr.P() != len(u.adj) {
		return
	}
	d := u.drivers[u.tr]
	if d == nil {
		var err error
		if d, err = tracker.NewDrivers(len(u.names), u.ctx); err != nil {
			return
		}
		u.drivers[u.tr] = d
		d.SetLevel(u.driverLevel())
		if s := u.slopes[u.tr]; s.slopes != nil && d.SetSlopes(s.slopes) == nil {
			// Restored: goes on as before the restart. Lag statistics that do
			// not fit (or none, from a file written before the test) start
			// afresh.
			_ = d.SetLags(s.lags)
			delete(u.slopes, u.tr)
		}
	}
	d.Observe(u.x, u.miss, u.tr)
	if refreshed || !d.Ready() {
		if err := d.Fit(u.tr); err != nil {
			return
		}
	}
	d.Adjust(u.adj, u.x, u.miss, u.tr)
	if err := u.tr.Evaluate(&u.score, u.adj, u.miss); err != nil {
		u.stepErrors++
	}
}

// driverSlopes returns the regression of tr's drivers to save with it
// (nil without context channels or before one was fitted); with fit, it
// fits it first (after the model's final refresh in fit).
func (u *Unit) driverSlopes(tr *tracker.Tracker, fit bool) []float64 {
	if u.drivers == nil && fit {
		u.syncContext()
	}
	if u.drivers == nil {
		return nil
	}
	d := u.drivers[tr]
	if fit {
		if d == nil {
			var err error
			if d, err = tracker.NewDrivers(len(u.names), u.ctx); err != nil {
				return nil
			}
			d.SetLevel(u.driverLevel())
			u.drivers[tr] = d
		}
		if d.Fit(tr) != nil {
			return nil
		}
	}
	if d == nil {
		return u.slopes[tr].slopes // restored, not used yet
	}
	return d.Slopes()
}

// driverLags returns the lag statistics of tr's drivers' slope test to
// save with it (nil without context channels); call it after driverSlopes.
func (u *Unit) driverLags(tr *tracker.Tracker) []float64 {
	if u.drivers == nil {
		return nil
	}
	if d := u.drivers[tr]; d != nil {
		return d.Lags()
	}
	return u.slopes[tr].lags // restored, not used yet
}

// savedDrivers is a regression and its test's lag statistics restored
// from a model file, kept until the model's drivers exist.
type savedDrivers struct{ slopes, lags []float64 }

// restoreSlopes keeps a saved regression (and the lag statistics of its
// slope test, nil in files written before the test) for tr until its
// drivers exist.
func (u *Unit) restoreSlopes(tr *tracker.Tracker, s, lags []float64) {
	if len(s) == 0 {
		return
	}
	if u.slopes == nil {
		u.slopes = map[*tracker.Tracker]savedDrivers{}
	}
	u.slopes[tr] = savedDrivers{s, lags}
}

// driverLevel is the unit's model.driver_level: the significance level of
// the test that keeps a driver's slope (tracker.DefaultDriverLevel when
// unset; negative: every slope kept untested).
func (u *Unit) driverLevel() float64 {
	l := u.p.cfg.ModelFor(u.Name).DriverLevel
	if l == 0 {
		return tracker.DefaultDriverLevel
	}
	return l
}

// contextIn returns the unit's context channels among its model channels.
func (u *Unit) contextIn() []string {
	var out []string
	for _, n := range u.names {
		if slices.Contains(u.context, n) {
			out = append(out, n)
		}
	}
	return out
}
