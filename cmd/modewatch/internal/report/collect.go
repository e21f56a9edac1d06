// Package report writes the replay report: a self-contained directory with
// index.html (no network needed to open it: inline CSS, no scripts, no
// external fonts) and SVG charts drawn with gonum.org/v1/plot, showing per
// unit T², SPE and φ against their limits with alert spans and labelled
// episodes shaded, each mode's loadings, a heat map of the top contributing
// channels, the summary of the replay and its alerts with the episodes
// they matched.
//
// Memory stays bounded on long replays: a Collector keeps at most
// 2·MaxBuckets buckets per unit (min and max of every statistic, and per
// channel the largest contribution ratio), merging neighbours in pairs
// when full, so a bucket covers 2^k consecutive frames.
package report

import (
	"math"
	"slices"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/tracker"
)

// DefaultBuckets is the default MaxBuckets: a chart holds between
// DefaultBuckets and 2·DefaultBuckets points, about one per pixel column.
const DefaultBuckets = 500

// Statistics in bucket order.
const (
	StatT2 = iota
	StatSPE
	StatPhi
	nStats
)

// statNames are the statistics' names in charts and file names.
var statNames = [nStats]string{"T²", "SPE", "φ"}
var statFiles = [nStats]string{"t2", "spe", "phi"}

// bucket summarises consecutive frames of one unit.
type bucket struct {
	from, to int64 // first and last frame start, Unix ns
	n        int   // frames scored (ready)
	min, max [nStats]float64
	limit    [nStats]float64 // limit at the last frame of the bucket
	over     [nStats]int     // frames above the limit
}

func (b *bucket) merge(o *bucket) {
	if o.n == 0 {
		return
	}
	if b.n == 0 {
		*b = *o
		return
	}
	b.to = o.to
	b.n += o.n
	for s := 0; s < nStats; s++ {
		b.min[s] = math.Min(b.min[s], o.min[s])
		b.max[s] = math.Max(b.max[s], o.max[s])
		b.over[s] += o.over[s]
	}
	b.limit = o.limit
}

// series is one unit's downsampled history.
type series struct {
	name    string
	names   []string // channel names, as the unit's model knows them
	per     int      // frames per bucket (a power of two)
	buckets []bucket
	// contrib[k*p+i] is the largest RBC/RBC-limit of channel i in bucket
	// k (Alcalá & Qin 2009: above 1, the channel alone explains a
	// significant part of the deviation).
	contrib []float32
	p       int
	frames  uint64
	last    int64
}

// Collector gathers the scores of a replay, one call per unit and frame
// (pipeline.ReplayOptions.OnScore). It is not safe for concurrent use; the
// pipeline calls OnScore from its frame goroutine.
type Collector struct {
	// MaxBuckets per unit; 0 means DefaultBuckets.
	MaxBuckets int
	units      []*series
	byName     map[string]*series
}

// NewCollector returns an empty collector.
func NewCollector() *Collector { return &Collector{byName: map[string]*series{}} }

// Observe records the latest score of unit u at frame start t. Frames in
// warm-up (no statistics yet) only advance the frame count.
func (c *Collector) Observe(u *pipeline.Unit, t time.Time) {
	p := 0
	if tr := u.Tracker(); tr != nil {
		p = tr.P()
	}
	c.add(u.Name, t, u.Score(), [nStats]float64{u.StatScale(alerts.StatT2), u.StatScale(alerts.StatSPE), u.StatScale(alerts.StatPhi)}, p, u.Channels)
}

// add records score sc of unit name at t, its T², SPE and φ limits
// multiplied by scale (the unit's budget calibration of each); p is the unit's channel count and names
// returns its channel names (called only when p changed).
func (c *Collector) add(name string, t time.Time, sc *tracker.Score, scale [nStats]float64, p int, names func() []string) {
	max := c.MaxBuckets
	if max <= 0 {
		max = DefaultBuckets
	}
	s := c.byName[name]
	if s == nil {
		s = &series{name: name, per: 1}
		c.byName[name] = s
		c.units = append(c.units, s)
	}
	s.frames++
	if !sc.Ready {
		return
	}
	if p != len(s.names) {
		s.setChannels(names())
	}
	ns := t.UnixNano()
	s.last = ns
	k := len(s.buckets) - 1
	if k < 0 || s.buckets[k].n >= s.per {
		if len(s.buckets) == 2*max {
			s.halve()
		}
		s.buckets = append(s.buckets, bucket{})
		n := len(s.contrib)
		s.contrib = slices.Grow(s.contrib, s.p)[:n+s.p] // no allocation once the buckets have been halved
		clear(s.contrib[n:])
		k = len(s.buckets) - 1
	}
	b := &s.buckets[k]
	vals := [nStats]float64{sc.T2, sc.SPE, sc.Phi}
	lims := [nStats]float64{scale[0] * sc.T2Limit, scale[1] * sc.SPELimit, scale[2] * sc.PhiLimit}
	if b.n == 0 {
		b.from = ns
		for i := range vals {
			b.min[i], b.max[i] = math.Inf(1), math.Inf(-1)
		}
	}
	b.to = ns
	b.n++
	for i, v := range vals {
		if math.IsNaN(v) {
			continue
		}
		b.min[i] = math.Min(b.min[i], v)
		b.max[i] = math.Max(b.max[i], v)
		b.limit[i] = lims[i]
		if v > lims[i] {
			b.over[i]++
		}
	}
	row := s.contrib[k*s.p : (k+1)*s.p]
	for _, ct := range sc.Contrib {
		if ct.Channel >= s.p || !(ct.RBCLimit > 0) {
			continue
		}
		if r := float32(ct.RBC / ct.RBCLimit); r > row[ct.Channel] {
			row[ct.Channel] = r
		}
	}
}

// setChannels adopts a longer channel list (channels discovered during
// warm-up), widening the contribution rows.
func (s *series) setChannels(names []string) {
	p := len(names)
	if p > s.p && len(s.buckets) > 0 {
		wide := make([]float32, len(s.buckets)*p)
		for k := range s.buckets {
			copy(wide[k*p:], s.contrib[k*s.p:(k+1)*s.p])
		}
		s.contrib = wide
	}
	if p > s.p {
		s.p = p
	}
	s.names = names
}

// halve merges neighbouring buckets in pairs.
func (s *series) halve() {
	n := len(s.buckets) / 2
	for k := 0; k < n; k++ {
		a, b := s.buckets[2*k], s.buckets[2*k+1]
		a.merge(&b)
		s.buckets[k] = a
		ra, rb := s.contrib[2*k*s.p:(2*k+1)*s.p], s.contrib[(2*k+1)*s.p:(2*k+2)*s.p]
		dst := s.contrib[k*s.p : (k+1)*s.p]
		for i := range dst {
			dst[i] = max(ra[i], rb[i])
		}
	}
	if len(s.buckets)%2 == 1 { // cannot happen with 2·max buckets; kept for safety
		s.buckets[n] = s.buckets[len(s.buckets)-1]
		copy(s.contrib[n*s.p:(n+1)*s.p], s.contrib[(len(s.buckets)-1)*s.p:])
		n++
	}
	s.buckets = s.buckets[:n]
	s.contrib = s.contrib[:n*s.p]
	s.per *= 2
}

// FramesPerBucket returns, per unit name, how many frames one chart point
// covers at most.
func (c *Collector) FramesPerBucket() map[string]int {
	out := map[string]int{}
	for _, s := range c.units {
		out[s.name] = s.per
	}
	return out
}
