package configs

import (
	"fmt"
	"math"
	"slices"
)

// validateDrivers checks units[].state, state_bands and context: a state
// channel and context channels must be channels of the channel map (when
// there is one), bands finite and ascending, and a context channel must
// not be one of the unit's own channels. owner maps each listed channel
// to the index of its unit.
// StateAuto as units[].state lets fit find the unit's operating states.
const StateAuto = "auto"

// StateNone as units[].state keeps the unit one model: fit does not look
// for a status channel that would split it into operating states.
const StateNone = "none"

func (c *Config) validateDrivers(v *validator, names map[string]int, owner map[string]int) {
	known := func(path, ch string) {
		if ch == "" {
			v.add(path, "empty channel name")
			return
		}
		if len(c.Channels) > 0 {
			if _, ok := names[ch]; !ok {
				v.add(path, "channel %q is not in the channel map", ch)
			}
		}
	}
	for ui, u := range c.Units {
		p := fmt.Sprintf("units[%d]", ui)
		switch {
		case u.State == StateAuto && len(u.StateBands) > 0:
			v.add(p+".state_bands", "bands apply to a state channel, not to found states (state: auto)")
		case u.State == StateNone && len(u.StateBands) > 0:
			v.add(p+".state_bands", "bands apply to a state channel, not to state: none")
		case u.State != "" && u.State != StateAuto && u.State != StateNone:
			known(p+".state", u.State)
		case u.State == "" && len(u.StateBands) > 0:
			v.add(p+".state_bands", "bands without a state channel (set units[%d].state)", ui)
		}
		for i, b := range u.StateBands {
			if math.IsNaN(b) || math.IsInf(b, 0) || (i > 0 && !(b > u.StateBands[i-1])) {
				v.add(fmt.Sprintf("%s.state_bands[%d]", p, i), "%g: band edges must be finite and ascending", b)
			}
		}
		for i, ch := range u.Context {
			cp := fmt.Sprintf("%s.context[%d]", p, i)
			known(cp, ch)
			if slices.Contains(u.Channels, ch) {
				v.add(cp, "channel %q is one of the unit's own channels; context names channels of other units", ch)
			} else if j, ok := owner[ch]; ok && j == ui {
				v.add(cp, "channel %q belongs to this unit", ch)
			}
			if slices.Contains(u.Context[:i], ch) {
				v.add(cp, "channel %q is listed twice", ch)
			}
		}
	}
}
