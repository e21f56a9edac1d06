package tracker

import (
	"encoding/binary"
	"fmt"
	"math"
)

// MaxLags bounds the number of lagged copies a [Lagged] augmentation
// appends (Ku, Storer & Georgakis 1995 choose 1 or 2 for most processes).
const MaxLags = 8

// Lagged turns frames of p channels into the frames of a dynamic model
// (Ku, Storer & Georgakis 1995, "Disturbance detection and isolation by
// dynamic principal component analysis", Chemom. Intell. Lab. Syst.
// 30(1)): the frame at time t followed by the L frames before it,
//
//	x̃_t = [x_t, x_{t−1}, …, x_{t−L}]   (p·(L+1) values)
//
// so that a [Tracker] of p·(L+1) channels models the serial correlation of
// the channels with the cross-correlation, and a sparse mode names
// sensor-and-lag pairs ([Lagged.Pair]). The L previous frames sit in a
// ring allocated by [NewLagged]; [Lagged.Augment] allocates nothing.
type Lagged struct {
	p, lags int
	ring    []float64 // lags × p, the previous frames (NaN: missing)
	head    int       // ring slot of x_{t−1}
	n       int       // previous frames held (≤ lags)
}

// NewLagged returns the augmentation of frames of p channels by lags
// previous frames (0 ≤ lags ≤ MaxLags; 0 passes frames through).
func NewLagged(p, lags int) (*Lagged, error) {
	if p < 1 || lags < 0 || lags > MaxLags {
		return nil, fmt.Errorf("tracker: lagged copies: %d channels and %d lags (want p ≥ 1 and 0 ≤ lags ≤ %d)", p, lags, MaxLags)
	}
	return &Lagged{p: p, lags: lags, ring: make([]float64, lags*p)}, nil
}

// Width returns the channels of an augmented frame, p·(L+1).
func (l *Lagged) Width() int { return l.p * (l.lags + 1) }

// Lags returns L.
func (l *Lagged) Lags() int { return l.lags }

// Pair returns the channel and the lag (frames back) of column j of an
// augmented frame.
func (l *Lagged) Pair(j int) (channel, lag int) { return j % l.p, j / l.p }

// PairName names column j of an augmented frame after the channel names
// (len p): the name itself at lag 0, "name[t-k]" at lag k.
func (l *Lagged) PairName(names []string, j int) string {
	c, k := l.Pair(j)
	if k == 0 {
		return names[c]
	}
	return fmt.Sprintf("%s[t-%d]", names[c], k)
}

// Ready reports whether L previous frames are held, so that an augmented
// frame has no lagged value missing for want of history.
func (l *Lagged) Ready() bool { return l.n == l.lags }

// Augment writes the augmented frame of x (len p; missing marks missing
// channels, nil for none) into dst and dstMissing (len Width; dstMissing
// may be nil), then moves x into the ring as the previous frame. A lagged
// value is missing where the channel was missing then, or before L frames
// were seen. It allocates nothing.
func (l *Lagged) Augment(dst []float64, dstMissing []bool, x []float64, missing []bool) {
	p := l.p
	if len(x) != p || len(dst) != l.Width() || (missing != nil && len(missing) != p) ||
		(dstMissing != nil && len(dstMissing) != l.Width()) {
		panic("tracker: Lagged.Augment: length mismatch")
	}
	for i, v := range x {
		if missing != nil && missing[i] {
			v = math.NaN()
		}
		dst[i] = v
	}
	for k := 1; k <= l.lags; k++ {
		out := dst[k*p : (k+1)*p]
		if k > l.n {
			for i := range out {
				out[i] = math.NaN()
			}
			continue
		}
		s := (l.head + k - 1) % l.lags
		copy(out, l.ring[s*p:(s+1)*p])
	}
	if dstMissing != nil {
		for j, v := range dst {
			dstMissing[j] = math.IsNaN(v)
		}
	}
	if l.lags == 0 {
		return
	}
	// x becomes x_{t−1}: one slot back from the current head.
	l.head = (l.head + l.lags - 1) % l.lags
	copy(l.ring[l.head*p:(l.head+1)*p], dst[:p])
	l.n = min(l.n+1, l.lags)
}

// Reset forgets the previous frames (after a gap in the data, so that no
// augmented frame joins frames that were not consecutive).
func (l *Lagged) Reset() { l.head, l.n = 0, 0 }

// MarshalBinary writes the previous frames held (nil-safe: nil for a nil
// Lagged), little-endian:
//
//	u32 p | u32 L | u32 n | n × p × f64 (x_{t−1} first; NaN: missing)
func (l *Lagged) MarshalBinary() ([]byte, error) {
	if l == nil {
		return nil, nil
	}
	b := make([]byte, 0, 12+8*l.n*l.p)
	b = binary.LittleEndian.AppendUint32(b, uint32(l.p))
	b = binary.LittleEndian.AppendUint32(b, uint32(l.lags))
	b = binary.LittleEndian.AppendUint32(b, uint32(l.n))
	for k := 0; k < l.n; k++ {
		s := (l.head + k) % l.lags
		for _, v := range l.ring[s*l.p : (s+1)*l.p] {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
		}
	}
	return b, nil
}

// UnmarshalBinary restores the previous frames written by MarshalBinary
// into a Lagged of the same p and L; on an error nothing changes. Empty
// data on a nil Lagged is no error.
func (l *Lagged) UnmarshalBinary(data []byte) error {
	if l == nil {
		if len(data) == 0 {
			return nil
		}
		return fmt.Errorf("tracker: lagged frames given to a model without lagged copies")
	}
	if len(data) < 12 {
		return fmt.Errorf("tracker: lagged frames: %d bytes is too short", len(data))
	}
	p, lags, n := int(binary.LittleEndian.Uint32(data)), int(binary.LittleEndian.Uint32(data[4:])), int(binary.LittleEndian.Uint32(data[8:]))
	switch {
	case p != l.p || lags != l.lags:
		return fmt.Errorf("tracker: lagged frames of %d channels and %d lags, this model has %d and %d", p, lags, l.p, l.lags)
	case n < 0 || n > lags || len(data) != 12+8*n*p:
		return fmt.Errorf("tracker: lagged frames: %d frames in %d bytes (at most %d frames of %d channels)", n, len(data), lags, p)
	}
	for i := 0; i < n*p; i++ {
		if v := math.Float64frombits(binary.LittleEndian.Uint64(data[12+8*i:])); math.IsInf(v, 0) {
			return fmt.Errorf("tracker: lagged frames: value %d is %v", i, v)
		}
	}
	l.head, l.n = 0, n
	for i := 0; i < n*p; i++ {
		l.ring[i] = math.Float64frombits(binary.LittleEndian.Uint64(data[12+8*i:]))
	}
	return nil
}
