// Package sim generates readings from an invented plant so that modewatch can
// be demonstrated and tested against a known truth.
//
// A scenario (YAML, see LoadBytes for the format) describes plant units made of assets, each asset
// carrying a few channels; a handful of latent drivers (load, ambient
// temperature, setpoints); how each channel depends on the drivers; the
// sampling, timestamp jitter and random dropouts; and labelled fault episodes.
//
// Every channel is
//
//	y(t) = base + Σ_terms gain·f(x(t)) + w(t) + σ·ε(t)
//
// where x_d(t) = v_d(t) - mean_d is driver d's deviation from its declared
// mean, f is x_a (linear), x_a² (square) or x_a·x_b (product), w is the
// channel's own slow wander (an Ornstein-Uhlenbeck process, optional) and ε is
// standard normal noise. A driver is
//
//	v_d(t) = mean + A·cos(2π(τ(t) - peak)/24 h) + W(t) + S(t)
//
// with τ(t) the UTC time of day, W an Ornstein-Uhlenbeck process with
// stationary standard deviation σ_W and correlation time τ_W, discretised
// exactly (Uhlenbeck & Ornstein 1930; the exact AR(1) form is common practice):
//
//	W_{k+1} = φ·W_k + σ_W·√(1-φ²)·ε_k,   φ = exp(-Δt/τ_W),   W_0 ~ N(0, σ_W²)
//
// and S a setpoint that holds one of the listed levels (offsets from mean) and,
// at each sample with probability Δt/hold, jumps to a level drawn uniformly
// from the list (its stationary distribution is uniform over the levels).
// Two slow terms may follow: a trend r·((t − start) mod R)/24 h (seasonal
// warming with no reset R; normal wear such as filter loading with one) and
// planned moves, each adding its offset from a given time on, ramped in
// over a given span (a setpoint change, a product grade).
//
// A channel may be gated by a driver: while that driver's value is ≤ 0
// the machine is at rest and the channel reads its rest value exactly (a
// stopped machine's speed of 0). A quantum rounds a channel to multiples of
// it before the decimals do. A scenario may split its run into normal days
// and test days (WriteSplit writes them as two files).
//
// Output is line protocol, one line per asset and sample: measurement = unit
// name, tag asset=<asset>, one float field per channel that is present, and a
// nanosecond timestamp (nominal sample time plus a uniform jitter in
// ±Jitter, drawn per line). A line whose channels are all missing is left
// out. Lines come in nominal time order; with jitter, the timestamps of
// different assets of one sample may be out of order by up to 2·Jitter, as
// from separate field devices. Values are clamped to [min, max] when given and
// rounded to the channel's decimals. The channel name in the auto-discovery
// form measurement.tagvalues.field is unit.asset.field.
//
// The generator is deterministic: math/rand/v2 PCG sources seeded from the
// scenario seed; the main stream draws the same number of values per sample
// whatever faults are active, and each fault episode has its own stream, so
// removing an episode changes only the channels it names.
package sim

import (
	"fmt"
	"math"
	"time"
)

// Scenario is a parsed and validated scenario. Fields are exported for
// inspection and for tests that derive expectations from the parameters;
// after changing them, NewGenerator re-checks consistency.
type Scenario struct {
	Name     string
	Seed     uint64
	Start    time.Time     // first nominal sample time, UTC
	Duration time.Duration // samples are at Start + k·Period for k·Period < Duration
	// Split, when set, ends the normal part: WriteFiles writes the samples
	// before it to normal.lp and the rest to test.lp (zero: one file).
	Split   time.Time
	Period  time.Duration // nominal sample period
	Jitter  time.Duration // timestamps are shifted by a uniform draw in [-Jitter, +Jitter]
	Dropout float64       // probability that one channel value is missing from one sample

	Drivers  []Driver // global drivers followed by the expanded asset-local ones
	Units    []Unit
	Episodes []Episode

	file string // source name for messages
}

// Driver is a latent process variable. Its value is
// mean + daily cycle + walk + step level (see the package documentation); the
// channels see its deviation from Mean.
type Driver struct {
	Name  string // global name, or unit.asset.name for an asset-local driver
	Mean  float64
	Daily Cycle
	Walk  Walk
	Steps Steps
	Trend Trend
	Moves []Move // planned changes, in time order
}

// Trend is a slow linear change PerDay·(t − Start)/24 h (seasonal warming;
// fouling or filter loading as normal wear). With Reset > 0 it starts
// again from 0 every Reset after Start (a filter changed, a heat exchanger
// cleaned): a sawtooth.
type Trend struct {
	PerDay float64
	Reset  time.Duration
}

// Move is a planned change of a driver that is not a fault (a setpoint
// change, a product grade or load change): from At the driver is higher by
// By, reached linearly over Over (zero: a step). Moves add up.
type Move struct {
	At   time.Time
	By   float64
	Over time.Duration
}

// Cycle is a daily cosine A·cos(2π(τ - Peak)/24 h), τ the UTC time of day.
type Cycle struct {
	Amplitude float64
	Peak      time.Duration // time of day of the maximum, in [0, 24h)
}

// Walk is an Ornstein-Uhlenbeck process with stationary standard deviation
// Sigma and correlation time Tau (zero Sigma: absent).
type Walk struct {
	Sigma float64
	Tau   time.Duration
}

// Steps is a setpoint holding one of Levels (offsets from the driver mean)
// for an exponentially distributed time with mean Hold (no levels: absent).
type Steps struct {
	Levels []float64
	Hold   time.Duration
}

// Unit is a plant unit: the line-protocol measurement and the default model
// unit of its channels.
type Unit struct {
	Name   string
	Assets []Asset
}

// Asset is one piece of equipment: the value of the asset tag.
type Asset struct {
	Name     string
	Channels []Channel
}

// Channel is one measured quantity of an asset: the line-protocol field.
type Channel struct {
	Field    string
	EngUnit  string  // engineering unit, e.g. "m3/h"
	Base     float64 // value when every driver sits at its mean
	Noise    float64 // σ of the white measurement noise, engineering units
	Decimals int     // values are rounded to this many decimals
	Min, Max float64 // clamp range; Min > Max (the default) means no clamp
	Wander   Walk    // the channel's own slow variation
	Terms    []Term
	// Quantum, when > 0, rounds the value to a multiple of it (a reading
	// in steps, e.g. a level in whole percent or a counter), before the
	// rounding to Decimals.
	Quantum float64
	Gate    Gate
}

// Gate ties a channel to a machine that starts and stops: when On, while
// driver Driver (an index into Scenario.Drivers) has a value (mean +
// deviation) ≤ 0 the machine is at rest and the channel reads Rest
// exactly, without noise (a speed of 0 when a swing machine is stopped).
// Sensor faults still apply to the rest reading.
type Gate struct {
	On     bool
	Driver int
	Rest   float64
}

// TermKind selects f in gain·f(x).
type TermKind int

// Term kinds.
const (
	Linear  TermKind = iota // gain·x_a
	Square                  // gain·x_a²
	Product                 // gain·x_a·x_b
)

// Term is one dependence of a channel on the drivers. A and B index
// Scenario.Drivers (B only for Product).
type Term struct {
	Kind TermKind
	A, B int
	Gain float64
}

// FaultKind names a kind of fault episode. The string values are the ones
// used in scenario files and truth files.
type FaultKind string

// Fault kinds.
const (
	// Bias adds Size to each named channel (sensor offset).
	Bias FaultKind = "bias"
	// Drift adds Size·(t-start)/(end-start): a ramp reaching Size at the end.
	Drift FaultKind = "drift"
	// Stuck freezes each named channel at the value it read at the first
	// sample of the episode.
	Stuck FaultKind = "stuck"
	// Noise multiplies the measurement noise σ by Factor.
	Noise FaultKind = "noise"
	// Spikes adds ±Size at random samples, Rate spikes per hour on average.
	Spikes FaultKind = "spikes"
	// Dropout removes the named channels from the output.
	Dropout FaultKind = "dropout"
	// Relation is a process fault that breaks the relation within a group:
	// the first named channel responds as if Driver were lower by Size, the
	// others as if it were higher by Size (ramped in over Ramp), so one
	// channel moves against the others.
	Relation FaultKind = "relation"
	// Outage silences every channel of one unit (a gateway or network
	// failure): nothing of the unit is written while it lasts.
	Outage FaultKind = "outage"
	// Effect is a gradual change of Driver's effect on the named channels
	// (fouling-like): every term involving Driver is multiplied by a factor
	// going linearly from 1 at the start to Factor at the end, and back to 1
	// after the end.
	Effect FaultKind = "effect"
)

var faultKinds = []FaultKind{Bias, Drift, Stuck, Noise, Spikes, Dropout, Relation, Effect, Outage}

// Episode is one labelled fault.
type Episode struct {
	ID       string
	Kind     FaultKind
	Start    time.Time // active for nominal sample times in [Start, End)
	End      time.Time
	Channels []string // unit.asset.field; for an outage, every channel of Unit
	Unit     string   // outage
	Size     float64  // bias, drift, spikes (engineering units); relation (driver units)
	Factor   float64  // noise (σ multiplier), effect (gain multiplier at the end)
	Rate     float64  // spikes per hour
	Driver   string   // relation, effect
	Ramp     time.Duration
}

// ChannelInfo describes one generated channel.
type ChannelInfo struct {
	Name    string // unit.asset.field, the auto-discovery form
	Unit    string
	Asset   string
	Field   string
	EngUnit string
}

// Channels lists every channel in output order.
func (s *Scenario) Channels() []ChannelInfo {
	var out []ChannelInfo
	for _, u := range s.Units {
		for _, a := range u.Assets {
			for _, c := range a.Channels {
				out = append(out, ChannelInfo{
					Name: u.Name + "." + a.Name + "." + c.Field,
					Unit: u.Name, Asset: a.Name, Field: c.Field, EngUnit: c.EngUnit,
				})
			}
		}
	}
	return out
}

// Samples returns the number of nominal sample instants, ⌈Duration/Period⌉.
func (s *Scenario) Samples() int {
	if s.Period <= 0 || s.Duration <= 0 {
		return 0
	}
	return int((s.Duration + s.Period - 1) / s.Period)
}

// End returns Start + Duration.
func (s *Scenario) End() time.Time { return s.Start.Add(s.Duration) }

// Rebase returns a copy of s shifted in time so that it starts at start
// (truncated to the second); fault episodes move with it. Daily cycles stay
// anchored to the UTC time of day, so the phase of the cycles relative to the
// start changes.
func (s *Scenario) Rebase(start time.Time) *Scenario {
	c := *s
	start = start.UTC().Truncate(time.Second)
	d := start.Sub(s.Start)
	c.Start = start
	if !s.Split.IsZero() {
		c.Split = s.Split.Add(d)
	}
	c.Drivers = append([]Driver(nil), s.Drivers...)
	for i := range c.Drivers {
		c.Drivers[i].Moves = append([]Move(nil), s.Drivers[i].Moves...)
		for j := range c.Drivers[i].Moves {
			c.Drivers[i].Moves[j].At = c.Drivers[i].Moves[j].At.Add(d)
		}
	}
	c.Episodes = make([]Episode, len(s.Episodes))
	for i, e := range s.Episodes {
		e.Start = e.Start.Add(d)
		e.End = e.End.Add(d)
		e.Channels = append([]string(nil), e.Channels...)
		c.Episodes[i] = e
	}
	return &c
}

// Head returns a copy of s cut to its first d: the split is dropped when
// it does not lie before the new end (all of it is then normal days), and
// only the episodes that start within d are kept.
func (s *Scenario) Head(d time.Duration) *Scenario {
	c := s.Clone()
	c.Duration = d
	if !c.Split.Before(c.End()) {
		c.Split = time.Time{}
	}
	c.Episodes = c.Episodes[:0]
	for _, e := range s.Episodes {
		if e.Start.Before(c.End()) {
			c.Episodes = append(c.Episodes, e)
		}
	}
	return c
}

// Normal returns the normal part of a split scenario, the samples before
// its split, as a scenario of its own without a split (s itself when it
// has no split).
func (s *Scenario) Normal() *Scenario {
	if s.Split.IsZero() {
		return s
	}
	return s.Head(s.Split.Sub(s.Start))
}

// Tested returns the test part of a split scenario, from its split to its
// end, as a scenario of its own without a split that starts at the split
// (s itself when it has no split). Its random draws start again from the
// seed, so its samples differ in detail from the same instants of s.
func (s *Scenario) Tested() *Scenario {
	if s.Split.IsZero() {
		return s
	}
	c := s.Clone()
	c.Start, c.Duration, c.Split = s.Split, s.End().Sub(s.Split), time.Time{}
	return c
}

// Clone returns a deep copy of s, for tests that alter a scenario.
func (s *Scenario) Clone() *Scenario {
	c := *s
	c.Drivers = append([]Driver(nil), s.Drivers...)
	for i := range c.Drivers {
		c.Drivers[i].Steps.Levels = append([]float64(nil), s.Drivers[i].Steps.Levels...)
		c.Drivers[i].Moves = append([]Move(nil), s.Drivers[i].Moves...)
	}
	c.Units = make([]Unit, len(s.Units))
	for i, u := range s.Units {
		c.Units[i] = Unit{Name: u.Name, Assets: make([]Asset, len(u.Assets))}
		for j, a := range u.Assets {
			na := Asset{Name: a.Name, Channels: make([]Channel, len(a.Channels))}
			for k, ch := range a.Channels {
				ch.Terms = append([]Term(nil), ch.Terms...)
				na.Channels[k] = ch
			}
			c.Units[i].Assets[j] = na
		}
	}
	c.Episodes = make([]Episode, len(s.Episodes))
	for i, e := range s.Episodes {
		e.Channels = append([]string(nil), e.Channels...)
		c.Episodes[i] = e
	}
	return &c
}

// driverIndex returns the index of the named driver or -1.
func (s *Scenario) driverIndex(name string) int {
	for i, d := range s.Drivers {
		if d.Name == name {
			return i
		}
	}
	return -1
}

// check verifies the internal consistency of s (names resolved, ranges sane).
// Load reports problems with file positions before this; check guards
// scenarios altered in code.
func (s *Scenario) check() error {
	if s.Period <= 0 {
		return fmt.Errorf("sim: period must be > 0")
	}
	if s.Duration <= 0 {
		return fmt.Errorf("sim: duration must be > 0")
	}
	if s.Jitter < 0 || 2*s.Jitter >= s.Period {
		return fmt.Errorf("sim: jitter must be in [0, period/2)")
	}
	if !(s.Dropout >= 0 && s.Dropout < 1) {
		return fmt.Errorf("sim: dropout must be in [0, 1)")
	}
	if !s.Split.IsZero() && (!s.Split.After(s.Start) || !s.Split.Before(s.End())) {
		return fmt.Errorf("sim: split must lie after start and before the end")
	}
	for _, d := range s.Drivers {
		if d.Walk.Sigma < 0 || (d.Walk.Sigma > 0 && d.Walk.Tau <= 0) {
			return fmt.Errorf("sim: driver %s: walk needs sigma ≥ 0 and tau > 0", d.Name)
		}
		if len(d.Steps.Levels) > 0 && d.Steps.Hold <= 0 {
			return fmt.Errorf("sim: driver %s: steps need hold > 0", d.Name)
		}
		if d.Trend.Reset < 0 {
			return fmt.Errorf("sim: driver %s: trend reset must be ≥ 0", d.Name)
		}
		for _, m := range d.Moves {
			if m.Over < 0 {
				return fmt.Errorf("sim: driver %s: move over must be ≥ 0", d.Name)
			}
		}
	}
	names := map[string]bool{}
	for _, u := range s.Units {
		for _, a := range u.Assets {
			for _, c := range a.Channels {
				n := u.Name + "." + a.Name + "." + c.Field
				if names[n] {
					return fmt.Errorf("sim: duplicate channel %s", n)
				}
				names[n] = true
				if c.Noise < 0 || math.IsNaN(c.Noise) {
					return fmt.Errorf("sim: channel %s: noise must be ≥ 0", n)
				}
				if c.Decimals < 0 || c.Decimals > 9 {
					return fmt.Errorf("sim: channel %s: decimals must be in [0, 9]", n)
				}
				if c.Gate.On && (c.Gate.Driver < 0 || c.Gate.Driver >= len(s.Drivers)) {
					return fmt.Errorf("sim: channel %s: gate refers to a missing driver", n)
				}
				if c.Quantum < 0 || math.IsNaN(c.Quantum) {
					return fmt.Errorf("sim: channel %s: quantum must be ≥ 0", n)
				}
				for _, t := range c.Terms {
					if t.A < 0 || t.A >= len(s.Drivers) || (t.Kind == Product && (t.B < 0 || t.B >= len(s.Drivers))) {
						return fmt.Errorf("sim: channel %s: term refers to a missing driver", n)
					}
				}
			}
		}
	}
	for _, e := range s.Episodes {
		if !e.End.After(e.Start) {
			return fmt.Errorf("sim: episode %s: end must be after start", e.ID)
		}
		if len(e.Channels) == 0 {
			return fmt.Errorf("sim: episode %s: no channels", e.ID)
		}
		for _, c := range e.Channels {
			if !names[c] {
				return fmt.Errorf("sim: episode %s: unknown channel %s", e.ID, c)
			}
		}
		known := false
		for _, k := range faultKinds {
			known = known || k == e.Kind
		}
		switch {
		case !known:
			return fmt.Errorf("sim: episode %s: unknown kind %q", e.ID, e.Kind)
		case (e.Kind == Relation || e.Kind == Effect) && s.driverIndex(e.Driver) < 0:
			return fmt.Errorf("sim: episode %s: unknown driver %s", e.ID, e.Driver)
		case e.Kind == Noise && !(e.Factor > 1):
			return fmt.Errorf("sim: episode %s: noise factor must be > 1", e.ID)
		case e.Kind == Spikes && !(e.Rate > 0):
			return fmt.Errorf("sim: episode %s: spike rate must be > 0", e.ID)
		case e.Ramp < 0:
			return fmt.Errorf("sim: episode %s: ramp must be ≥ 0", e.ID)
		}
	}
	return nil
}
