package cli

import (
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"sort"
	"time"

	"modewatch/alerts"
	"modewatch/sim"
)

// suiteSwitchWindow: an alert that starts this soon after a switch of its
// plant (after the end of a planned move's ramp) counts as raised by the
// switch.
const suiteSwitchWindow = 2 * time.Minute

// suiteSwitch is one switch of a plant's test days that is no fault: a
// machine start or stop (a gated channel leaving or reaching its rest
// reading), a status channel changing (noise-free, no decimals), or a
// planned move of a driver (a grade change, a setpoint move).
type suiteSwitch struct {
	t    time.Time
	over time.Duration // a planned move's ramp; 0 for a switch
	unit string        // "": a driver move, which may reach every unit
	what string
}

// plantSwitches runs the plant's generator over [from, to) and returns its
// switches in time order and the names of its status channels.
func plantSwitches(s *sim.Scenario, from, to time.Time) ([]suiteSwitch, map[string]bool, error) {
	type watch struct {
		name, unit string
		gate       bool
		rest       float64
	}
	var ws []watch
	idx := []int{}
	status := map[string]bool{}
	k := 0
	for _, u := range s.Units {
		for _, a := range u.Assets {
			for _, c := range a.Channels {
				name := u.Name + "." + a.Name + "." + c.Field
				switch {
				case c.Gate.On:
					ws, idx = append(ws, watch{name: name, unit: u.Name, gate: true, rest: c.Gate.Rest}), append(idx, k)
				case c.Noise == 0 && c.Decimals == 0:
					ws, idx = append(ws, watch{name: name, unit: u.Name}), append(idx, k)
					status[name] = true
				}
				k++
			}
		}
	}
	var out []suiteSwitch
	for _, d := range s.Drivers {
		for _, m := range d.Moves {
			if !m.At.Before(from) && m.At.Before(to) {
				out = append(out, suiteSwitch{t: m.At, over: m.Over, what: "move of " + d.Name})
			}
		}
	}
	g, err := s.NewGenerator()
	if err != nil {
		return nil, nil, err
	}
	last := make([]float64, len(ws))
	for i := range last {
		last[i] = math.NaN() // none yet
	}
	for g.Step() {
		t := g.Time()
		if t.Before(from) {
			continue
		}
		if !t.Before(to) {
			break
		}
		v := g.Values()
		for i, w := range ws {
			x := v[idx[i]]
			if math.IsNaN(x) {
				continue // a dropout: the reading is missing, the machine is as it was
			}
			if w.gate {
				x = b2f(x != w.rest)
			}
			if !math.IsNaN(last[i]) && x != last[i] {
				what := fmt.Sprintf("%s %g→%g", w.name, last[i], x)
				if w.gate {
					what = w.name + " stopped"
					if x == 1 {
						what = w.name + " started"
					}
				}
				out = append(out, suiteSwitch{t: t, unit: w.unit, what: what})
			}
			last[i] = x
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].t.Before(out[j].t) })
	return out, status, nil
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// switchAlerts reads the alert records of a replay (JSON lines, every
// revision) and lists the false alerts (isFalse: the strict scorer's rule,
// evaluate.Run.False) that start within suiteSwitchWindow after a switch
// of their unit (or during a driver move's ramp or that long after it), or
// name a status channel among their first three contributors or as their
// data-quality channel.
func switchAlerts(path string, isFalse func(unit string, start time.Time) bool, sw []suiteSwitch, status map[string]bool) ([]string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return readSwitchAlerts(f, path, isFalse, sw, status)
}

// readSwitchAlerts is switchAlerts reading the records from rd (named
// path in errors).
func readSwitchAlerts(rd io.Reader, path string, isFalse func(unit string, start time.Time) bool, sw []suiteSwitch, status map[string]bool) ([]string, error) {
	var span time.Duration // the longest window after a switch's start
	for _, w := range sw {
		span = max(span, w.over+suiteSwitchWindow)
	}
	out := []string{}
	done := map[string]bool{}
	err := scanRecords(rd, path, func(r *alerts.Record) {
		if r.Kind != alerts.KindIncident || done[r.ID] || !isFalse(r.Unit, r.Start) {
			return
		}
		done[r.ID] = true
		var why []string
		i := sort.Search(len(sw), func(i int) bool { return sw[i].t.After(r.Start) })
		for j := i - 1; j >= 0 && r.Start.Sub(sw[j].t) <= span; j-- {
			if r.Start.Sub(sw[j].t) > sw[j].over+suiteSwitchWindow {
				continue
			}
			if sw[j].unit == "" || sw[j].unit == r.Unit {
				why = append(why, fmt.Sprintf("%s after %s", r.Start.Sub(sw[j].t), sw[j].what))
				break
			}
		}
		names := make([]string, 0, 4)
		for _, c := range r.Contributors[:min(3, len(r.Contributors))] {
			names = append(names, c.Channel)
		}
		if r.Quality != nil {
			names = append(names, r.Quality.Channel)
		}
		for _, n := range names {
			if status[n] {
				why = append(why, "names status channel "+n)
			}
		}
		if len(why) > 0 {
			out = append(out, fmt.Sprintf("%s (%s)", r.ID, why[0]))
		}
	})
	if err != nil {
		return nil, err
	}
	slices.Sort(out)
	return out, nil
}
