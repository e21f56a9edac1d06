package pipeline

import (
	"slices"
	"sync"
)

// Learning around incidents and incident locations: the engine's side.
//
// The alarm engine hands each unit the channels of its open, not accepted
// incidents (alerts.Masking); the unit learns every frame with those
// channels replaced by their reconstruction (tracker.StepMasked). The mask
// lives in a box per unit name, so that a mask handed over before the
// unit exists (a restored alarm snapshot) is not lost.

// maskBox holds one unit's mask as the alarm engine last set it.
type maskBox struct {
	mu  sync.Mutex
	ver uint64
	ch  []string
}

// masks maps unit names to their boxes.
type masks struct {
	mu sync.Mutex
	m  map[string]*maskBox
}

func (ms *masks) box(unit string) *maskBox {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	if ms.m == nil {
		ms.m = map[string]*maskBox{}
	}
	b := ms.m[unit]
	if b == nil {
		b = &maskBox{}
		ms.m[unit] = b
	}
	return b
}

// Mask implements alerts.Masking: it stores the unit's mask for its next
// frame (called under the alarm engine's lock; it only copies).
func (l learning) Mask(unit string, channels []string) {
	if l.p.opt.Fit {
		return // fit learns from every frame of its (normal) input
	}
	b := l.p.masks.box(unit)
	b.mu.Lock()
	b.ch = append(b.ch[:0], channels...)
	b.ver++
	b.mu.Unlock()
}

// learnMask returns the mask the unit's next frame is learned with (nil:
// none), rebuilt only when the engine changed it or the unit grew.
func (u *Unit) learnMask() []bool {
	if u.mbox == nil {
		u.mbox = u.p.masks.box(u.Name)
	}
	b := u.mbox
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.ver == u.mver && len(u.mask) == len(u.names) {
		if !u.masked {
			return nil
		}
		return u.mask
	}
	u.mver = b.ver
	if len(u.mask) != len(u.names) {
		u.mask = make([]bool, len(u.names))
	}
	u.masked = false
	for k, n := range u.names {
		u.mask[k] = slices.Contains(b.ch, n)
		u.masked = u.masked || u.mask[k]
	}
	if !u.masked {
		return nil
	}
	return u.mask
}

// location appends to dst the names of the frame's location: the ranked
// contributors over their own RBC limits, widened by the supports of the
// modes that hold them. It allocates only when the unit grew.
func (u *Unit) location(dst []string) []string {
	s := &u.score
	if len(u.locMark) != len(u.names) {
		u.locMark = make([]bool, len(u.names))
	}
	clear(u.locMark)
	add := func(i int) {
		if i >= 0 && i < len(u.names) && !u.locMark[i] {
			u.locMark[i] = true
			dst = append(dst, u.names[i])
		}
	}
	ms := u.tr.Modes()
	for _, c := range s.Contrib {
		if !(c.RBCLimit > 0 && c.RBC > c.RBCLimit) {
			continue
		}
		add(c.Channel)
		for _, id := range c.Modes {
			for j := 0; j < ms.Count(); j++ {
				if m := ms.Mode(j); m.ID == id {
					for _, i := range m.Support {
						add(i)
					}
				}
			}
		}
	}
	return dst
}
