package pipeline

import (
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"

	"modewatch/stream"
)

// Context suggestions. While fitting, the pipeline accumulates the
// covariance of every modelled channel over the frames where all are
// present (shifted by the first such frame, for accuracy). At the end it
// suggests, for each unit, channels of other units that explain a large
// share of the unit's variance: regressing each standardized own channel j
// on a candidate c alone explains corr(c, j)² of its variance, so c
// explains
//
//	share(c) = (1/|O|) Σ_{j ∈ O} corr(c, j)²
//
// of the unit's total standardized variance (O: the unit's own channels).

const (
	// suggestShare is the least share of a unit's variance a channel of
	// another unit must explain to be suggested (design choice).
	suggestShare = 0.25
	// suggestMax bounds the suggestions per unit.
	suggestMax = 3
	// suggestWork bounds the cross-product work per frame (p²): with more
	// channels only every k-th complete frame is accumulated.
	suggestWork = 40000
	// suggestChannels bounds the channels considered at all.
	suggestChannels = 2000
)

// ContextSuggestion is a channel of another unit that explains Share of a
// unit's standardized variance (see fit's output).
type ContextSuggestion struct {
	Channel string  `json:"channel"`
	Unit    string  `json:"unit"` // the unit the channel belongs to
	Share   float64 `json:"share"`
}

// crossStats accumulates the cross-products of the modelled channels
// (fit only; one goroutine, under p.mu).
type crossStats struct {
	idx   []int // registry indices of the modelled channels
	x0    []float64
	x     *mat.VecDense
	sum   []float64
	cp    *mat.SymDense
	n     int
	every int
	k     int
	off   bool // too many channels
}

// addFrame accumulates frame f when every modelled channel is present.
// It allocates only when the set of modelled channels changed (the
// accumulation restarts then: the fit's first frames discover them).
func (p *Pipeline) addCross(f *stream.Frame) {
	c := &p.cross
	if c.off {
		return
	}
	n := 0
	for _, u := range p.owner {
		if u != nil {
			n++
		}
	}
	if n != len(c.idx) {
		if n > suggestChannels {
			c.off = true
			return
		}
		c.idx = c.idx[:0]
		for i, u := range p.owner {
			if u != nil {
				c.idx = append(c.idx, i)
			}
		}
		c.x0 = nil
		c.sum = make([]float64, n)
		c.x = mat.NewVecDense(max(n, 1), nil)
		c.cp = mat.NewSymDense(max(n, 1), nil)
		c.n, c.k = 0, 0
		c.every = max(1, n*n/suggestWork)
	}
	if n == 0 {
		return
	}
	for _, i := range c.idx {
		if i >= len(f.Values) || f.Missing[i] {
			return
		}
	}
	if c.k++; c.k%c.every != 0 {
		return
	}
	if c.x0 == nil {
		c.x0 = make([]float64, n)
		for a, i := range c.idx {
			c.x0[a] = f.Values[i]
		}
	}
	for a, i := range c.idx {
		v := f.Values[i] - c.x0[a]
		c.x.SetVec(a, v)
		c.sum[a] += v
	}
	c.cp.SymRankOne(c.cp, 1, c.x)
	c.n++
}

// suggestions returns, per unit name, the channels of other units that
// explain at least suggestShare of its variance, largest first.
func (p *Pipeline) suggestions() map[string][]ContextSuggestion {
	c := &p.cross
	if c.off || c.n < 10 {
		return nil
	}
	n := len(c.idx)
	sd := make([]float64, n)
	cov := func(a, b int) float64 {
		fn := float64(c.n)
		return c.cp.At(a, b)/fn - c.sum[a]/fn*c.sum[b]/fn
	}
	for a := range sd {
		sd[a] = math.Sqrt(math.Max(cov(a, a), 0))
	}
	out := map[string][]ContextSuggestion{}
	for _, u := range p.units {
		var own []int
		for a, i := range c.idx {
			if p.owner[i] == u && sd[a] > 0 {
				own = append(own, a)
			}
		}
		if len(own) == 0 {
			continue
		}
		var sug []ContextSuggestion
		for b, i := range c.idx {
			o := p.owner[i]
			name := p.ch.Channel(i).Name
			if o == u || sd[b] == 0 || slices.Contains(u.context, name) {
				continue
			}
			s := 0.0
			for _, a := range own {
				r := cov(a, b) / (sd[a] * sd[b])
				s += r * r
			}
			s /= float64(len(own))
			if s >= suggestShare {
				sug = append(sug, ContextSuggestion{Channel: name, Unit: o.Name, Share: s})
			}
		}
		slices.SortFunc(sug, func(x, y ContextSuggestion) int {
			if x.Share != y.Share {
				if x.Share > y.Share {
					return -1
				}
				return 1
			}
			return 0
		})
		if len(sug) > suggestMax {
			sug = sug[:suggestMax]
		}
		if len(sug) > 0 {
			out[u.Name] = sug
		}
	}
	return out
}
