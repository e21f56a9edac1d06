package statuspage

import (
	"math"
	"sync"
	"time"
)

// History defaults: one bucket per minute of frame time, a day of them.
const (
	DefaultBucket  = time.Minute
	DefaultBuckets = 1440
	// DefaultMaxUnits bounds the units a History keeps (a unit beyond it
	// is counted in Dropped, not kept).
	DefaultMaxUnits = 4096
)

// Stats is one scored frame of a unit: each statistic with its control
// limit. NaN marks a statistic not computed (warm-up, no limit).
type Stats struct {
	T2, T2Limit   float64
	SPE, SPELimit float64
	Phi, PhiLimit float64
}

// bucket holds, per statistic, the value with the largest value/limit
// ratio among the frames of one bucket, and that frame's limit. Float32
// halves the memory; the trend needs three significant digits.
type bucket struct {
	start int64 // bucket start, unix seconds; 0: empty
	v     [3]float32
	lim   [3]float32
}

// ring is one unit's buckets, oldest overwritten first.
type ring struct {
	b    []bucket
	head int // index of the newest bucket
	n    int // buckets in use
}

// History keeps, per unit, a bounded ring of the statistics against their
// limits over the last day (by default), at one-minute resolution: each
// bucket holds the largest value/limit ratio of each statistic in that
// minute of frame time, so no excursion is lost to downsampling. Memory is
// fixed per unit: Buckets × 32 bytes (46 KiB for a day of minutes), and at
// most MaxUnits units are kept. Frames older than a unit's newest bucket
// are ignored (frames arrive in time order per unit). Safe for concurrent
// use; Add allocates only the first time a unit is seen.
type History struct {
	bucket   time.Duration
	size     int
	maxUnits int

	mu      sync.Mutex
	units   map[string]*ring
	dropped uint64
}

// NewHistory returns a History of size buckets of width bucket each (zero
// values: DefaultBucket, DefaultBuckets) keeping at most maxUnits units (0:
// DefaultMaxUnits).
func NewHistory(bucket time.Duration, size, maxUnits int) *History {
	if bucket < time.Second {
		bucket = DefaultBucket
	}
	if size <= 0 {
		size = DefaultBuckets
	}
	if maxUnits <= 0 {
		maxUnits = DefaultMaxUnits
	}
	return &History{bucket: bucket.Truncate(time.Second), size: size, maxUnits: maxUnits, units: map[string]*ring{}}
}

// Span returns the time the history covers (buckets × bucket width).
func (h *History) Span() time.Duration { return time.Duration(h.size) * h.bucket }

// Bucket returns the width of one bucket.
func (h *History) Bucket() time.Duration { return h.bucket }

// Dropped returns how many frames were not kept because MaxUnits units
// were already kept.
func (h *History) Dropped() uint64 {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.dropped
}

// ratio is v/lim, or -1 when either is not a positive finite number.
func ratio(v, lim float32) float32 {
	if !(lim > 0) || math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) || math.IsInf(float64(lim), 0) {
		return -1
	}
	return v / lim
}

func f32(x float64) float32 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return float32(math.NaN())
	}
	return float32(x)
}

// Add records one scored frame of unit at frame time t.
func (h *History) Add(unit string, t time.Time, s Stats) {
	w := int64(h.bucket / time.Second)
	start := t.Unix() - mod(t.Unix(), w)
	vals := [3]float32{f32(s.T2), f32(s.SPE), f32(s.Phi)}
	lims := [3]float32{f32(s.T2Limit), f32(s.SPELimit), f32(s.PhiLimit)}
	h.mu.Lock()
	defer h.mu.Unlock()
	r := h.units[unit]
	if r == nil {
		if len(h.units) >= h.maxUnits {
			h.dropped++
			return
		}
		r = &ring{b: make([]bucket, h.size), head: -1}
		h.units[unit] = r
	}
	if r.n > 0 {
		cur := &r.b[r.head]
		switch {
		case start < cur.start:
			return // older than the newest bucket
		case start == cur.start:
			for i := range vals {
				if rv := ratio(vals[i], lims[i]); rv >= 0 && rv > ratio(cur.v[i], cur.lim[i]) {
					cur.v[i], cur.lim[i] = vals[i], lims[i]
				}
			}
			return
		}
	}
	r.head = (r.head + 1) % h.size
	if r.n < h.size {
		r.n++
	}
	r.b[r.head] = bucket{start: start, v: vals, lim: lims}
}

func mod(a, b int64) int64 {
	m := a % b
	if m < 0 {
		m += b
	}
	return m
}

// Series is a statistic's trend: per point, the value with the largest
// value/limit ratio in the point's span and its limit (null when no frame
// fell in it, or the statistic was not computed).
type Series struct {
	Value []*float64 `json:"value"`
	Limit []*float64 `json:"limit"`
}

// Trend is the history of one unit over a window, in points of equal span
// from Start: point i covers [Start + i·Step, Start + (i+1)·Step).
type Trend struct {
	Start time.Time `json:"start"`
	StepS float64   `json:"step_s"`
	T2    Series    `json:"t2"`
	SPE   Series    `json:"spe"`
	Phi   Series    `json:"phi"`
}

// Trend returns unit's history over the window that ends at end, in
// points of at least one bucket each (fewer points than asked when the
// window holds fewer buckets). ok is false for a unit never seen.
func (h *History) Trend(unit string, end time.Time, window time.Duration, points int) (tr Trend, ok bool) {
	w := int64(h.bucket / time.Second)
	nb := int64(window / h.bucket)
	if nb < 1 {
		nb = 1
	}
	if points <= 0 || int64(points) > nb {
		points = int(nb)
	}
	per := (nb + int64(points) - 1) / int64(points) // buckets per point
	points = int((nb + per - 1) / per)
	last := end.Unix() - mod(end.Unix(), w) // start of the bucket holding end
	first := last - (int64(points)*per-1)*w
	tr.Start = time.Unix(first, 0).UTC()
	tr.StepS = float64(per * w)
	vals := make([][3]float32, points)
	lims := make([][3]float32, points)
	for i := range vals {
		nan := float32(math.NaN())
		vals[i] = [3]float32{nan, nan, nan}
		lims[i] = vals[i]
	}
	h.mu.Lock()
	r := h.units[unit]
	if r != nil {
		for k := 0; k < r.n; k++ {
			b := &r.b[mod(int64(r.head-k), int64(h.size))]
			if b.start < first {
				break
			}
			if b.start > last {
				continue
			}
			p := (b.start - first) / (per * w)
			for i := 0; i < 3; i++ {
				if ratio(b.v[i], b.lim[i]) > ratio(vals[p][i], lims[p][i]) || (math.IsNaN(float64(vals[p][i])) && !math.IsNaN(float64(b.v[i]))) {
					vals[p][i], lims[p][i] = b.v[i], b.lim[i]
				}
			}
		}
	}
	h.mu.Unlock()
	out := [3]*Series{&tr.T2, &tr.SPE, &tr.Phi}
	for i, s := range out {
		s.Value = make([]*float64, points)
		s.Limit = make([]*float64, points)
		for p := 0; p < points; p++ {
			s.Value[p] = num(vals[p][i])
			s.Limit[p] = num(lims[p][i])
		}
	}
	return tr, r != nil
}

// num returns x rounded to 4 significant digits, or nil when not finite.
func num(x float32) *float64 {
	if math.IsNaN(float64(x)) || math.IsInf(float64(x), 0) {
		return nil
	}
	v := float64(x)
	if v != 0 {
		e := math.Pow(10, 3-math.Floor(math.Log10(math.Abs(v))))
		v = math.Round(v*e) / e
	}
	return &v
}
