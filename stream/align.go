package stream

import (
	"errors"
	"fmt"
	"math"
	"sync/atomic"
	"time"
)

// Frame is one aligned frame over all known channels (index = channel index
// in the registry). The aligner reuses it: copy what you keep.
type Frame struct {
	// Start is the frame's time kP, a whole multiple of the period since
	// the Unix epoch (UTC): the frame holds the readings stamped within
	// half a period of it, [kP − P/2, kP + P/2) (see Aligner).
	Start   time.Time
	Values  []float64 // one per channel, in the channel's engineering unit; NaN where Missing
	Missing []bool    // true where no valid value within the staleness limit
	// Times holds the event time (ns since the Unix epoch) of the reading
	// behind each present value, which may be from an earlier frame
	// (carried within the staleness limit); meaningless where Missing.
	// A restart seeds the aligner with these (Aligner.Seed).
	Times   []int64
	Segment int // segment number, from 0; incremented after a clock jump
}

// AlignConfig sets the frame alignment. The zero value of each duration
// means its default.
type AlignConfig struct {
	// Period is the frame length; required (> 0). Frames are centred on
	// integer multiples of Period since the Unix epoch (see Aligner).
	Period time.Duration
	// Staleness: a channel's latest reading is used in a frame ending at E
	// while E - t ≤ Staleness; older, it is missing. Default 3 periods.
	Staleness time.Duration
	// Lateness is how far event time must pass a frame's end before the
	// frame is emitted; readings for already emitted frames are late and
	// dropped. Default 1 period; negative means none.
	Lateness time.Duration
	// ClockJump: a reading more than this after the newest reading so far
	// ends the segment (pending frames are emitted, channel state is
	// cleared) instead of emitting a frame per period of the gap. Default
	// 100 periods.
	ClockJump time.Duration
}

func (c AlignConfig) withDefaults() (AlignConfig, error) {
	if c.Period <= 0 {
		return c, fmt.Errorf("stream: frame period %v is not positive", c.Period)
	}
	if c.Staleness == 0 {
		c.Staleness = 3 * c.Period
	}
	if c.Staleness < 0 {
		return c, fmt.Errorf("stream: staleness %v is negative", c.Staleness)
	}
	if c.Lateness == 0 {
		c.Lateness = c.Period
	}
	if c.Lateness < 0 {
		c.Lateness = 0
	}
	if c.ClockJump == 0 {
		c.ClockJump = 100 * c.Period
	}
	for _, d := range []time.Duration{c.Period, c.Staleness, c.Lateness, c.ClockJump} {
		if d > maxSetting {
			return c, fmt.Errorf("stream: alignment setting %v is too large", d)
		}
	}
	if c.ClockJump < c.Period {
		return c, fmt.Errorf("stream: clock jump limit %v is below the period %v", c.ClockJump, c.Period)
	}
	return c, nil
}

// AlignStats are the aligner's counters (readings unless stated).
type AlignStats struct {
	Readings   uint64 // accepted into a pending frame
	Late       uint64 // for a frame already emitted; dropped
	Duplicate  uint64 // same channel and timestamp as a pending reading; last wins
	OutOfOrder uint64 // older than the channel's newest reading in the same frame; kept the newer
	Frames     uint64 // frames emitted
	ClockJumps uint64 // segments ended by a gap over ClockJump
}

// ErrHandler wraps an error returned by the frame handler.
var ErrHandler = errors.New("frame handler failed")

// ErrTimeRange reports an event time outside MinTime..MaxTime.
var ErrTimeRange = errors.New("event time out of range")

// MinTime and MaxTime bound event times (about years 1823 to 2116), so that
// frame arithmetic in int64 nanoseconds cannot overflow.
var (
	MinTime = time.Unix(0, -maxAbsTime).UTC()
	MaxTime = time.Unix(0, maxAbsTime).UTC()
)

const (
	maxAbsTime = 1 << 62
	maxSetting = 1 << 60 // bound for configured durations, ns (about 36 years)
)

const noTime = math.MinInt64

// slot holds, for one pending frame, each channel's newest reading in it.
type slot struct {
	t []int64 // ns since epoch; noTime when none
	v []float64
}

// Aligner collects readings into frames by event time. It is not safe for
// concurrent use except Watermark, which any goroutine may call.
//
// Frame k, at time kP for period P, covers [kP − h, kP − h + P) with
// h = ⌊P/2⌋: a reading belongs to the frame whose time is nearest its
// timestamp. Its value for channel c is the newest reading of c with
// timestamp < E = kP − h + P (the frame's end), if E - t ≤ Staleness;
// otherwise missing. Frame k is emitted once the newest event time seen is
// ≥ E + Lateness, and always in order; a reading for an emitted frame is
// late.
//
// The frames are centred on the grid, not started on it, because sources
// publish on it: a gateway polled every P from a whole second or minute
// stamps its readings at kP plus a small jitter either way. Frames
// starting at kP would split those readings at random between two frames,
// so that about a quarter of the frames would repeat the reading before
// and a quarter of the readings would be overwritten unseen; centred
// frames give each reading its own frame for any jitter below P/2.
type Aligner struct {
	cfg    AlignConfig
	per    int64 // period, ns
	half   int64 // ⌊per/2⌋: frame k covers [k·per − half, k·per − half + per)
	stale  int64
	late   int64
	jump   int64
	handle func(*Frame) error

	ring   []slot
	p      int
	carryT []int64
	carryV []float64
	frame  Frame

	started bool  // a reading seen in this segment
	emitted bool  // a frame emitted in this segment
	next    int64 // index of the next frame to emit
	maxK    int64 // highest frame index holding a reading
	tmax    int64 // newest event time in the segment, ns
	cur     *slot // slot of the last Advance
	curT    int64

	watermark atomic.Int64 // end of the last emitted frame, ns
	stats     AlignStats
	onJump    func(from, to time.Time, segment int)
}

// NewAligner returns an aligner for p channels (more can be added with Grow)
// that calls handle for every emitted frame, in order. handle must not keep
// the *Frame. A handler error stops the aligner's caller (it is returned,
// wrapped in ErrHandler).
func NewAligner(cfg AlignConfig, p int, handle func(*Frame) error) (*Aligner, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	per := int64(cfg.Period)
	n := int((int64(cfg.Lateness)+per-1)/per) + 3
	a := &Aligner{
		cfg: cfg, per: per, half: per / 2, stale: int64(cfg.Staleness), late: int64(cfg.Lateness),
		jump: int64(cfg.ClockJump), handle: handle, ring: make([]slot, n),
	}
	a.watermark.Store(noTime)
	a.Grow(p)
	return a, nil
}

// Config returns the configuration with defaults filled in.
func (a *Aligner) Config() AlignConfig { return a.cfg }

// OnClockJump sets a function called when a clock jump ends a segment, with
// the newest event time before the gap and the reading after it.
func (a *Aligner) OnClockJump(f func(from, to time.Time, segment int)) { a.onJump = f }

// Len returns the number of channels.
func (a *Aligner) Len() int { return a.p }

// Grow makes room for p channels (a no-op if there are already p or more).
// New channels are missing until their first reading.
func (a *Aligner) Grow(p int) {
	if p <= a.p {
		return
	}
	grow := func(t []int64, v []float64) ([]int64, []float64) {
		for len(t) < p {
			t = append(t, noTime)
			v = append(v, math.NaN())
		}
		return t, v
	}
	for i := range a.ring {
		a.ring[i].t, a.ring[i].v = grow(a.ring[i].t, a.ring[i].v)
	}
	a.carryT, a.carryV = grow(a.carryT, a.carryV)
	for len(a.frame.Values) < p {
		a.frame.Values = append(a.frame.Values, math.NaN())
		a.frame.Missing = append(a.frame.Missing, true)
		a.frame.Times = append(a.frame.Times, noTime)
	}
	a.p = p
}

// floorDiv returns ⌊x/y⌋ for y > 0.
func floorDiv(x, y int64) int64 {
	q := x / y
	if x%y < 0 {
		q--
	}
	return q
}

// Advance prepares to add readings with event time t (ns since the Unix
// epoch): it ends the segment on a clock jump, emits the frames that t makes
// final, and selects t's frame. It reports false if t is late (readings at t
// must be dropped; the caller counts them with CountLate). It returns an error
// only if the handler failed.
func (a *Aligner) Advance(t int64) (bool, error) {
	if t < -maxAbsTime || t > maxAbsTime {
		return false, fmt.Errorf("stream: %d ns: %w", t, ErrTimeRange)
	}
	if a.started && t > a.tmax && t-a.tmax > a.jump {
		from := a.tmax
		if err := a.endSegment(); err != nil {
			return false, err
		}
		a.stats.ClockJumps++
		if a.onJump != nil {
			a.onJump(time.Unix(0, from).UTC(), time.Unix(0, t).UTC(), a.frame.Segment)
		}
	}
	k := a.frameOf(t)
	if !a.started {
		a.started = true
		a.next, a.maxK, a.tmax = k, k, t
	}
	if t > a.tmax {
		a.tmax = t
		// Emit frames whose end + lateness ≤ tmax, including frames of a gap
		// shorter than ClockJump, which hold no readings.
		for a.end(a.next) <= a.tmax-a.late {
			if a.next > a.maxK {
				a.maxK = a.next
			}
			if err := a.emit(); err != nil {
				return false, err
			}
		}
	}
	if k < a.next {
		if a.emitted || a.maxK-k >= int64(len(a.ring)) || a.end(k)-a.per < a.watermark.Load() {
			return false, nil
		}
		a.next = k // before any emission, a segment may extend backwards
	}
	if k > a.maxK {
		a.maxK = k
	}
	a.cur = a.slot(k)
	a.curT = t
	return true, nil
}

// Put records reading v of channel c at the time of the last successful
// Advance. A NaN v marks the channel missing in that frame (an invalid
// reading replaces an older valid one). It panics if c ≥ Len().
func (a *Aligner) Put(c int, v float64) {
	s := a.cur
	switch old := s.t[c]; {
	case a.curT > old:
	case a.curT == old:
		a.stats.Duplicate++
	default:
		a.stats.OutOfOrder++
		return
	}
	s.t[c] = a.curT
	s.v[c] = v
	a.stats.Readings++
}

// CountLate counts n readings dropped because Advance reported them late.
func (a *Aligner) CountLate(n int) { a.stats.Late += uint64(n) }

// Add is Advance followed by Put for a single reading; it reports whether the
// reading was accepted (false: late, counted).
func (a *Aligner) Add(c int, t time.Time, v float64) (bool, error) {
	ok, err := a.Advance(t.UnixNano())
	if err != nil || !ok {
		if err == nil {
			a.CountLate(1)
		}
		return false, err
	}
	a.Put(c, v)
	return true, nil
}

// frameOf returns the index of the frame holding event time t (ns).
func (a *Aligner) frameOf(t int64) int64 { return floorDiv(t+a.half, a.per) }

// end returns the end of frame k (ns): the first event time after it.
func (a *Aligner) end(k int64) int64 { return (k+1)*a.per - a.half }

// FrameEnd returns the end of the frame at time start (a Frame.Start) for
// period: the first event time after the readings it can hold,
// start − ⌊period/2⌋ + period (see Aligner).
func FrameEnd(start time.Time, period time.Duration) time.Time {
	return start.Add(period - period/2)
}

// slot returns the ring slot of frame k (k may be negative: before 1970).
func (a *Aligner) slot(k int64) *slot {
	n := int64(len(a.ring))
	return &a.ring[int((k%n+n)%n)]
}

// emit hands frame a.next to the handler.
func (a *Aligner) emit() error {
	k := a.next
	s := a.slot(k)
	end := a.end(k)
	f := &a.frame
	// A carried reading is valid while t ≥ end - Staleness; noTime (the
	// minimum int64) is always below that bound.
	minT := end - a.stale
	p := a.p
	st, sv := s.t[:p], s.v[:p]
	ct, cv := a.carryT[:p], a.carryV[:p]
	fv, fm, ft := f.Values[:p], f.Missing[:p], f.Times[:p]
	for c, t := range st {
		v := sv[c]
		if t != noTime {
			st[c] = noTime
			// Without seeding the carry is always older than a reading of
			// this frame; a seeded one (Seed) can be newer and is kept.
			if t > ct[c] {
				ct[c], cv[c] = t, v
			}
		} else {
			t, v = ct[c], cv[c]
		}
		// t < end excludes a seeded reading newer than this frame.
		if t >= minT && t < end && v == v {
			fv[c], fm[c], ft[c] = v, false, t
		} else {
			fv[c], fm[c], ft[c] = math.NaN(), true, noTime
		}
	}
	f.Start = time.Unix(0, k*a.per).UTC()
	a.next = k + 1
	a.emitted = true
	a.stats.Frames++
	a.watermark.Store(end)
	if a.handle != nil {
		if err := a.handle(f); err != nil {
			return fmt.Errorf("stream: frame %s: %w: %w", f.Start.Format(time.RFC3339Nano), ErrHandler, err)
		}
	}
	return nil
}

// Flush emits every pending frame up to the one holding the newest reading,
// as at the end of input. Readings for those frames are late afterwards.
func (a *Aligner) Flush() error {
	if !a.started {
		return nil
	}
	for a.next <= a.maxK {
		if err := a.emit(); err != nil {
			return err
		}
	}
	return nil
}

// endSegment flushes and clears the channel state; the next reading starts
// segment Segment+1.
func (a *Aligner) endSegment() error {
	if err := a.Flush(); err != nil {
		return err
	}
	for c := range a.carryT {
		a.carryT[c], a.carryV[c] = noTime, math.NaN()
	}
	a.started, a.emitted = false, false
	a.frame.Segment++
	return nil
}

// Watermark returns the end of the last emitted frame: every reading with an
// earlier event time has been handled (emitted or counted late). It returns
// the zero Time before the first frame. Safe for concurrent use.
func (a *Aligner) Watermark() time.Time {
	w := a.watermark.Load()
	if w == noTime {
		return time.Time{}
	}
	return time.Unix(0, w).UTC()
}

// Stats returns the counters.
func (a *Aligner) Stats() AlignStats { return a.stats }

// ErrSeedLate reports a Seed for a channel that already has a reading.
var ErrSeedLate = errors.New("stream: channel seeded after its first reading")

// Seed sets channel c's carried reading to v at event time t, as if that
// reading had arrived in an earlier frame, so that a restarted aligner
// carries it into the following frames exactly as an uninterrupted one
// would: it is present in a frame ending at E while t < E and E - t ≤
// Staleness, until a newer reading of c replaces it. A restart passes the
// Values and Times of the last frame its checkpoint covers. It must be
// called before c's first reading (else ErrSeedLate); frames already
// emitted are not changed. It panics if c ≥ Len().
func (a *Aligner) Seed(c int, v float64, t time.Time) error {
	if a.carryT[c] != noTime {
		return ErrSeedLate
	}
	for i := range a.ring {
		if a.ring[i].t[c] != noTime {
			return ErrSeedLate
		}
	}
	if t.Before(MinTime) || t.After(MaxTime) {
		return fmt.Errorf("stream: seed at %s: %w", t.Format(time.RFC3339Nano), ErrTimeRange)
	}
	a.carryT[c], a.carryV[c] = t.UnixNano(), v
	return nil
}
