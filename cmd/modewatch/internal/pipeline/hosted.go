package pipeline

import (
	"fmt"

	"modewatch/stream"
)

// FrameUnit scores frame f for the unit called name only: the handler of
// a unit's own intake when an instance of a cluster owns some units and
// reads each one's readings through its own consumer and aligner. A unit
// not present yet is created over the registry's channels that belong to
// it (after RemoveUnit, or on its first frame). Other units are not
// stepped, whatever f holds for their channels.
func (p *Pipeline) FrameUnit(name string, f *stream.Frame) error {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.known < p.ch.Len() {
		p.assign()
	}
	u := p.byName[name]
	if u == nil {
		u = p.claim(name)
	}
	if p.frames == 0 {
		p.first = f.Start
	}
	p.frames++
	if f.Start.After(p.last) {
		p.last = f.Start
	}
	u.step(f)
	return nil
}

// claim creates unit name (see rebuild) over the registry's channels that
// belong to it and no running unit holds. Called under p.mu.
func (p *Pipeline) claim(name string) *Unit {
	u := p.rebuild(name)
	if u.baseline {
		p.resolve(u)
		return u
	}
	for i := 0; i < p.known; i++ {
		if o := p.owner[i]; o != nil && p.byName[o.Name] == o {
			continue
		}
		c := p.ch.Channel(i)
		if c.Model && p.unitOf(c) == name && u.addChannel(i, c.Name) {
			p.owner[i] = u
		}
	}
	return u
}

// rebuild creates unit name: from the fitted baseline when it holds the
// unit (a unit removed by RemoveUnit and back without a checkpoint starts
// where it started the first time), else empty, to warm up. Called under
// p.mu.
func (p *Pipeline) rebuild(name string) *Unit {
	if b := p.baselineUnit(name); b != nil {
		u, err := p.unitFromModel(b, p.opt.Period)
		if err == nil {
			return u
		}
		p.log.Error("fitted unit cannot be rebuilt; the unit warms up", "unit", name, "err", err)
	}
	return p.newUnit(name)
}

// RemoveUnit stops scoring the unit called name and forgets its model: the
// unit moved to another instance. Its channels are free for the unit when
// it comes back (Restore from its checkpoint, or FrameUnit). Its alarm
// state stays in the alarm engine until a restore replaces it.
func (p *Pipeline) RemoveUnit(name string) error {
	p.mu.Lock()
	defer p.mu.Unlock()
	u := p.lookup(name)
	if u == nil {
		return fmt.Errorf("%w: %q", ErrNoUnit, name)
	}
	p.drop(u)
	for i, o := range p.owner {
		if o == u {
			p.owner[i] = nil
		}
	}
	p.pool.forget(u)
	return nil
}

// Fresh reports whether the unit called name is as New built it from the
// fitted baseline (with what Options.Prepare set, such as empirical
// limits) and has scored no frame: taking it over needs no rebuild.
func (p *Pipeline) Fresh(name string) bool {
	p.mu.Lock()
	defer p.mu.Unlock()
	u := p.lookup(name)
	return u != nil && u.baseline && u.frames == 0 && u.skipUntil.IsZero()
}
