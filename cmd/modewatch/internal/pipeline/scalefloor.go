package pipeline

import (
	"math"

	"modewatch/alerts"
	"modewatch/tracker"
)

// DefaultResolutionFloor is the default of model.resolution_floor: the
// multiple c of a channel's resolution q below which its scale does not
// fall (tracker.SetScaleFloor). A channel whose data-quality profile
// learned a step q (the resolution of a quantised reading,
// alerts.ChannelProfile.Step) is standardized with max(σ, c·q). A reading
// is not known better than its resolution (common practice); the
// quantisation noise of a step q alone has variance q²/12 (Widrow &
// Kollár 2008, Quantization Noise, ch. 4; from memory), the least floor
// (c = 1/√12) any quantised channel deserves. At c = 1 one step of a
// nearly constant channel is one standard deviation, while a move of
// many steps still stands out. Chosen on the realism suite and the demo
// together (README: 1/√12 leaves one step at 3.5 σ, which still opened
// the district-heating pumps' false alert; from 3 steps the floor reaches
// quantised valves that move several steps and the false alerts rise).
const DefaultResolutionFloor = 1.0

// resolutionFloor returns the unit's model.resolution_floor (0: none).
func (u *Unit) resolutionFloor() float64 {
	c := u.p.cfg.ModelFor(u.Name).ResolutionFloor
	if c == 0 {
		c = DefaultResolutionFloor
	}
	return max(c, 0)
}

// scaleFloorOf returns the scale floor of each of the width columns of a
// tracker over the channels names (column j is channel j mod len(names):
// lagged copies share their channel's floor), from the profiles prof
// (matched by channel name): c·q for a profiled channel with a step q, 0
// for the others. It returns nil when no column has a floor.
func scaleFloorOf(names []string, width int, prof []alerts.ChannelProfile, c float64) []float64 {
	if !(c > 0) || len(names) == 0 || len(prof) == 0 {
		return nil
	}
	step := make(map[string]float64, len(prof))
	for i := range prof {
		if p := &prof[i]; p.Frames > 0 && p.Step > 0 && !math.IsInf(p.Step, 0) {
			step[p.Channel] = p.Step
		}
	}
	if len(step) == 0 {
		return nil
	}
	out := make([]float64, width)
	for j := range out {
		out[j] = c * step[names[j%len(names)]]
	}
	return out
}

// floorScale sets tr's scale floor from the unit's data-quality profiles
// prof (learned in fit, else those of its model file) and its
// model.resolution_floor.
// A tracker narrower than the unit's channels (a model of fewer channels
// than the registry has grown to) is left as it is.
func (u *Unit) floorScale(tr *tracker.Tracker, prof []alerts.ChannelProfile) {
	if tr == nil || tr.P() < len(u.names) || len(u.names) == 0 || tr.P()%len(u.names) != 0 {
		return
	}
	tr.SetScaleFloor(scaleFloorOf(u.names, tr.P(), prof, u.resolutionFloor()))
	u.shrinkFrom(tr, prof) // the correlation shrinkage reads the same profiles (serial.go)
}
