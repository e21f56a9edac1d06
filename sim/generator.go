package sim

import (
	"fmt"
	"hash/fnv"
	"iter"
	"math"
	"math/rand/v2"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// streamMain is the PCG stream selector of the main random stream ("modewatc").
const streamMain = 0x6d6f646577617463

// Generator produces a scenario's samples one nominal sample instant at a
// time, in time order, holding only the current sample in memory.
//
//	g, _ := s.NewGenerator()
//	for g.Step() { buf = g.AppendLines(buf[:0]) ... }
type Generator struct {
	s      *Scenario
	rng    *rand.Rand
	k, n   int
	start  int64 // Unix ns of the first sample
	period int64
	now    int64 // Unix ns of the current nominal sample

	drv []drvState
	x   []float64 // driver deviations x_d at the current sample
	xs  []float64 // scratch copy of x for channels under a process fault

	ch     []chanState
	values []float64 // observed value per channel, NaN if missing

	assets []assetState
	units  []unitState
	eps    []epState
	active []bool // per episode: active at the current sample

	enc lineprotocol.Encoder
}

type drvState struct {
	amp, peak float64 // cycle amplitude, peak time of day in ns
	wSigma    float64
	phi, sd   float64 // walk AR(1) coefficient and innovation σ
	w         float64
	levels    []float64
	pSwitch   float64
	level     int
	mean      float64
	trend     float64 // per ns
	reset     int64   // ns, 0: never
	moves     []move
}

type move struct {
	at, over int64 // Unix ns, ns
	by       float64
}

type epRef struct {
	ep  int // index into eps
	pos int // position of the channel in the episode's channel list
}

type chanState struct {
	base, noise float64
	scale       float64 // 10^decimals
	min, max    float64
	clamp       bool
	wSigma      float64
	phi, sd     float64
	w           float64
	terms       []Term
	eps         []epRef
	field       string
	quantum     float64
	gated       bool
	gate        int
	rest        float64
}

type assetState struct {
	unit   string
	name   string
	c0, c1 int   // channel range
	stamp  int64 // Unix ns timestamp of the current line
}

type unitState struct {
	name   string
	a0, a1 int // asset range
}

type epState struct {
	Episode
	rng        *rand.Rand
	start, end int64
	driver     int
	pSpike     float64
	held       []float64
	heldSet    []bool
}

// NewGenerator checks s and returns a generator positioned before the first
// sample.
func (s *Scenario) NewGenerator() (*Generator, error) {
	if err := s.check(); err != nil {
		return nil, err
	}
	g := &Generator{
		s:      s,
		rng:    rand.New(rand.NewPCG(s.Seed, streamMain)),
		n:      s.Samples(),
		start:  s.Start.UnixNano(),
		period: int64(s.Period),
		k:      -1,
	}
	dt := s.Period.Seconds()
	g.drv = make([]drvState, len(s.Drivers))
	for i, d := range s.Drivers {
		ds := drvState{
			amp:    d.Daily.Amplitude,
			peak:   float64(d.Daily.Peak),
			wSigma: d.Walk.Sigma,
			levels: d.Steps.Levels,
			mean:   d.Mean,
			trend:  d.Trend.PerDay / float64(24*time.Hour),
			reset:  int64(d.Trend.Reset),
		}
		for _, m := range d.Moves {
			ds.moves = append(ds.moves, move{at: m.At.UnixNano(), over: int64(m.Over), by: m.By})
		}
		if d.Walk.Sigma > 0 {
			ds.phi = math.Exp(-dt / d.Walk.Tau.Seconds())
			ds.sd = d.Walk.Sigma * math.Sqrt(1-ds.phi*ds.phi)
		}
		if len(d.Steps.Levels) > 0 {
			ds.pSwitch = math.Min(1, dt/d.Steps.Hold.Seconds())
		}
		g.drv[i] = ds
	}
	g.x = make([]float64, len(s.Drivers))
	g.xs = make([]float64, len(s.Drivers))
	index := map[string]int{}
	for _, u := range s.Units {
		us := unitState{name: u.Name, a0: len(g.assets)}
		for _, a := range u.Assets {
			as := assetState{unit: u.Name, name: a.Name, c0: len(g.ch)}
			for _, c := range a.Channels {
				cs := chanState{
					base: c.Base, noise: c.Noise, scale: math.Pow10(c.Decimals),
					min: c.Min, max: c.Max, clamp: c.Min < c.Max,
					wSigma: c.Wander.Sigma, terms: c.Terms, field: c.Field,
					quantum: c.Quantum, gated: c.Gate.On, gate: c.Gate.Driver, rest: c.Gate.Rest,
				}
				if c.Wander.Sigma > 0 {
					cs.phi = math.Exp(-dt / c.Wander.Tau.Seconds())
					cs.sd = c.Wander.Sigma * math.Sqrt(1-cs.phi*cs.phi)
				}
				index[u.Name+"."+a.Name+"."+c.Field] = len(g.ch)
				g.ch = append(g.ch, cs)
			}
			as.c1 = len(g.ch)
			g.assets = append(g.assets, as)
		}
		us.a1 = len(g.assets)
		g.units = append(g.units, us)
	}
	g.values = make([]float64, len(g.ch))
	for i, e := range s.Episodes {
		h := fnv.New64a()
		h.Write([]byte(e.ID))
		es := epState{
			Episode: e,
			rng:     rand.New(rand.NewPCG(s.Seed, h.Sum64())),
			start:   e.Start.UnixNano(),
			end:     e.End.UnixNano(),
			driver:  s.driverIndex(e.Driver),
			pSpike:  math.Min(1, e.Rate*s.Period.Hours()),
			held:    make([]float64, len(e.Channels)),
			heldSet: make([]bool, len(e.Channels)),
		}
		for pos, c := range e.Channels {
			ci := index[c]
			g.ch[ci].eps = append(g.ch[ci].eps, epRef{ep: i, pos: pos})
		}
		g.eps = append(g.eps, es)
	}
	g.active = make([]bool, len(g.eps))
	return g, nil
}

// Step advances to the next nominal sample and computes it; it returns false
// after the last sample.
func (g *Generator) Step() bool {
	if g.k+1 >= g.n {
		g.k = g.n
		return false
	}
	g.k++
	g.now = g.start + int64(g.k)*g.period
	first := g.k == 0
	const day = float64(24 * time.Hour)
	tod := float64(((g.now % int64(24*time.Hour)) + int64(24*time.Hour)) % int64(24*time.Hour))
	for i := range g.drv {
		d := &g.drv[i]
		x := 0.0
		if d.amp != 0 {
			x += d.amp * math.Cos(2*math.Pi*(tod-d.peak)/day)
		}
		if d.wSigma > 0 {
			if first {
				d.w = d.wSigma * g.rng.NormFloat64()
			} else {
				d.w = d.phi*d.w + d.sd*g.rng.NormFloat64()
			}
			x += d.w
		}
		if len(d.levels) > 0 {
			if first {
				d.level = g.rng.IntN(len(d.levels))
			} else if g.rng.Float64() < d.pSwitch {
				d.level = g.rng.IntN(len(d.levels))
			}
			x += d.levels[d.level]
		}
		if d.trend != 0 {
			el := g.now - g.start
			if d.reset > 0 {
				el %= d.reset
			}
			x += d.trend * float64(el)
		}
		for _, m := range d.moves {
			if g.now < m.at {
				break
			}
			if m.over > 0 && g.now-m.at < m.over {
				x += m.by * float64(g.now-m.at) / float64(m.over)
			} else {
				x += m.by
			}
		}
		g.x[i] = x
	}
	for i := range g.eps {
		e := &g.eps[i]
		g.active[i] = g.now >= e.start && g.now < e.end
	}
	jitter := int64(g.s.Jitter)
	for ai := range g.assets {
		a := &g.assets[ai]
		a.stamp = g.now
		if jitter > 0 {
			a.stamp += g.rng.Int64N(2*jitter+1) - jitter
		}
		for ci := a.c0; ci < a.c1; ci++ {
			g.values[ci] = g.channel(ci)
		}
	}
	return true
}

// channel computes channel ci's observed value at the current sample (NaN if
// missing). The main stream draws the same values whatever episodes are active.
func (g *Generator) channel(ci int) float64 {
	c := &g.ch[ci]
	anyActive := false
	for range g.activeEps(c) {
		anyActive = true
		break
	}
	x := g.x
	if anyActive {
		x = g.relationDrivers(c)
	}
	y := g.process(c, x, anyActive)
	y = g.sensorNoise(c, y)
	dropped := false
	if g.s.Dropout > 0 {
		dropped = g.rng.Float64() < g.s.Dropout
	}
	if anyActive {
		y = g.sensorFaults(c, y)
	}
	y = c.reading(y)
	if anyActive {
		var lost bool
		y, lost = g.heldOrLost(c, y)
		dropped = dropped || lost
	}
	if dropped {
		return math.NaN()
	}
	return y
}

// relationDrivers returns the drivers as channel c sees them: g.x, or a
// copy of it with the shifts of c's active relation faults (the first
// channel of a relation sees the driver moved down, the others up).
func (g *Generator) relationDrivers(c *chanState) []float64 {
	x := g.x
	copied := false
	for e, pos := range g.activeEps(c) {
		if e.Kind != Relation {
			continue
		}
		if !copied {
			copy(g.xs, g.x)
			x, copied = g.xs, true
		}
		shift := e.Size
		if e.Ramp > 0 {
			shift *= math.Min(1, float64(g.now-e.start)/float64(e.Ramp))
		}
		if pos == 0 {
			x[e.driver] -= shift
		} else {
			x[e.driver] += shift
		}
	}
	return x
}

// process is channel c's true value from the drivers x: its base plus
// each term times its gain, the gains changed by active effect faults.
func (g *Generator) process(c *chanState, x []float64, anyActive bool) float64 {
	y := c.base
	for _, t := range c.terms {
		var f float64
		switch t.Kind {
		case Linear:
			f = x[t.A]
		case Square:
			f = x[t.A] * x[t.A]
		case Product:
			f = x[t.A] * x[t.B]
		}
		gain := t.Gain
		if anyActive {
			for e := range g.activeEps(c) {
				if e.Kind == Effect && (t.A == e.driver || (t.Kind == Product && t.B == e.driver)) {
					gain *= 1 + (e.Factor-1)*g.frac(e)
				}
			}
		}
		y += gain * f
	}
	return y
}

// sensorNoise adds channel c's wander and white noise to y, and holds a
// gated channel at its rest value while its gate driver is off.
func (g *Generator) sensorNoise(c *chanState, y float64) float64 {
	if c.wSigma > 0 {
		if g.k == 0 {
			c.w = c.wSigma * g.rng.NormFloat64()
		} else {
			c.w = c.phi*c.w + c.sd*g.rng.NormFloat64()
		}
		y += c.w
	}
	if c.noise > 0 {
		y += c.noise * g.rng.NormFloat64()
	}
	if c.gated && g.drv[c.gate].mean+g.x[c.gate] <= 0 {
		y = c.rest // at rest: the noise was drawn all the same, for the stream
	}
	return y
}

// sensorFaults adds the active bias, drift, noise and spike faults of
// channel c to y.
func (g *Generator) sensorFaults(c *chanState, y float64) float64 {
	for e := range g.activeEps(c) {
		switch e.Kind {
		case Bias:
			y += e.Size
		case Drift:
			y += e.Size * g.frac(e)
		case Noise:
			y += c.noise * math.Sqrt(e.Factor*e.Factor-1) * e.rng.NormFloat64()
		case Spikes:
			if e.rng.Float64() < e.pSpike {
				if e.rng.Float64() < 0.5 {
					y -= e.Size
				} else {
					y += e.Size
				}
			}
		}
	}
	return y
}

// reading is y as the instrument reports it: clamped to its range,
// quantised, rounded to its resolution.
func (c *chanState) reading(y float64) float64 {
	if c.clamp {
		y = math.Max(c.min, math.Min(c.max, y))
	}
	if c.quantum > 0 {
		y = math.Round(y/c.quantum) * c.quantum
	}
	return math.Round(y*c.scale) / c.scale
}

// heldOrLost applies channel c's active stuck faults (the reading holds
// the first value seen) and reports whether a dropout or outage fault
// loses the reading.
func (g *Generator) heldOrLost(c *chanState, y float64) (float64, bool) {
	lost := false
	for e, pos := range g.activeEps(c) {
		switch e.Kind {
		case Stuck:
			if !e.heldSet[pos] {
				e.held[pos], e.heldSet[pos] = y, true
			}
			y = e.held[pos]
		case Dropout, Outage:
			lost = true
		}
	}
	return y, lost
}

// activeEps yields the episodes of channel c active at the current
// sample, in the channel's order, each with the channel's position in it.
func (g *Generator) activeEps(c *chanState) iter.Seq2[*epState, int] {
	return func(yield func(*epState, int) bool) {
		for _, r := range c.eps {
			if g.active[r.ep] && !yield(&g.eps[r.ep], r.pos) {
				return
			}
		}
	}
}

// frac is the elapsed fraction of episode e at the current sample, in [0, 1).
func (g *Generator) frac(e *epState) float64 {
	return float64(g.now-e.start) / float64(e.end-e.start)
}

// Index returns the current sample number (0-based).
func (g *Generator) Index() int { return g.k }

// Time returns the nominal time of the current sample.
func (g *Generator) Time() time.Time { return time.Unix(0, g.now).UTC() }

// Values returns the observed value of every channel at the current sample,
// in Scenario.Channels order, NaN where the value is missing. The slice is
// reused by the next Step.
func (g *Generator) Values() []float64 { return g.values }

// Drivers returns the driver deviations x_d at the current sample, in
// Scenario.Drivers order. The slice is reused by the next Step.
func (g *Generator) Drivers() []float64 { return g.x }

// AppendLines appends the current sample's line protocol for every unit to
// dst: one line per asset with at least one value present.
func (g *Generator) AppendLines(dst []byte) ([]byte, error) {
	for u := range g.units {
		var err error
		if dst, err = g.AppendUnit(dst, u); err != nil {
			return dst, err
		}
	}
	return dst, nil
}

// Units returns the number of plant units (for AppendUnit).
func (g *Generator) Units() int { return len(g.units) }

// UnitName returns the name of unit u.
func (g *Generator) UnitName(u int) string { return g.units[u].name }

// AppendUnit appends the current sample's lines of unit u to dst, encoded by
// the lineprotocol Encoder (nanosecond timestamps).
func (g *Generator) AppendUnit(dst []byte, u int) ([]byte, error) {
	g.enc.SetBuffer(dst)
	us := g.units[u]
	for ai := us.a0; ai < us.a1; ai++ {
		a := &g.assets[ai]
		started := false
		for ci := a.c0; ci < a.c1; ci++ {
			v := g.values[ci]
			if math.IsNaN(v) {
				continue
			}
			if !started {
				g.enc.StartLine(a.unit)
				g.enc.AddTag("asset", a.name)
				started = true
			}
			fv, _ := lineprotocol.FloatValue(v)
			g.enc.AddField(g.ch[ci].field, fv)
		}
		if started {
			g.enc.EndLine(time.Unix(0, a.stamp))
		}
	}
	out := g.enc.Bytes()
	if out == nil {
		out = dst
	}
	if err := g.enc.Err(); err != nil {
		return out, fmt.Errorf("sim: encoding %s at %s: %w", us.name, g.Time().Format(time.RFC3339), err)
	}
	if len(out) > len(dst) && out[len(out)-1] != '\n' {
		out = append(out, '\n')
	}
	return out, nil
}
