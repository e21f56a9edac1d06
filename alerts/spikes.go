package alerts

import (
	"math"
	"time"
)

// QualitySpikes is the data-quality kind of a channel giving more
// one-frame spikes within SpikeSpan than its normal log ever did (an
// intermittent connection, a failing transmitter, electrical noise).
const QualitySpikes = "spikes"

// Settings of the spike rule (design choices; the test of a reading
// against both its neighbours is the classical one for isolated outliers
// in a time series, and the scale is the mean absolute first difference,
// which for Gaussian noise of standard deviation σ is 2σ/√π).
const (
	// SpikeSpan is the plant time over which spikes are counted.
	SpikeSpan = time.Hour
	// SpikeK: a reading is a spike when it departs from both the reading
	// before and the reading after it, in the same direction, by more
	// than SpikeK standard deviations of the channel's frame-to-frame
	// change (and by more than its quantisation step). For Gaussian noise
	// that is about 2·10⁻⁵ of the frames (the two changes share the
	// middle reading: correlation ½).
	SpikeK = 3.5
	// SpikeMargin: the channel is in alarm while it has more than its
	// normal log's largest count within SpikeSpan plus SpikeMargin spikes
	// in the last SpikeSpan, and more than a quarter of that in the last
	// quarter of it. Chosen on the realism suite over ten seeds of every
	// plant: 2 instead of 3 reported 62 faults sooner and none later, with
	// one false alert more in 100 runs; 1 added six (README, Validation).
	SpikeMargin = 2
	// MaxSpikeCount bounds the spikes remembered per channel: a channel
	// with that many within SpikeSpan in its normal log is spiky by
	// nature and gets no spike rule.
	MaxSpikeCount = 64
	// spikeLearnAfter is the number of frame-to-frame changes the learner
	// averages before it counts spikes against its running scale.
	spikeLearnAfter = 100
)

// spikeTrack follows one channel's last three readings and its recent
// spikes. It allocates nothing.
type spikeTrack struct {
	a, b, c float64 // the readings of frames k − 2, k − 1 and k
	run     int     // consecutive frames with a reading (up to 3)
	ring    [MaxSpikeCount]int64
	head    int // next slot
	n       int // spikes in the ring
}

// step takes the reading of frame k (ok false: missing) and reports
// whether the reading of frame k − 1 was a spike: it departs from both
// its neighbours in the same direction by more than size. A spike is
// remembered.
func (s *spikeTrack) step(v float64, ok bool, k int64, size float64) bool {
	if !ok || v != v {
		s.run = 0
		return false
	}
	s.a, s.b, s.c = s.b, s.c, v
	s.run = min(s.run+1, 3)
	if s.run < 3 {
		return false
	}
	d1, d2 := s.b-s.a, s.b-s.c
	if !(d1*d2 > 0 && math.Min(math.Abs(d1), math.Abs(d2)) > size) {
		return false
	}
	s.ring[s.head] = k - 1
	s.head = (s.head + 1) % MaxSpikeCount
	s.n = min(s.n+1, MaxSpikeCount)
	return true
}

// inAlarm reports whether the channel has had more than lim = most +
// SpikeMargin spikes in the last span frames and more than a quarter of
// lim in the last quarter of it: the condition ends soon after the spikes
// stop (a normal spike then finds the quarter nearly empty), not a whole
// span later.
func (s *spikeTrack) inAlarm(k int64, span, most int) bool {
	lim := most + SpikeMargin
	return 4*s.count(k, max(span/4, 1)) > lim && s.count(k, span) > lim
}

// count returns the spikes remembered at frames after k − span.
func (s *spikeTrack) count(k int64, span int) int {
	c := 0
	for c < s.n && s.spike(c) > k-int64(span) {
		c++
	}
	return c
}

// spike returns the frame of the i-th newest spike remembered (i < n).
func (s *spikeTrack) spike(i int) int64 {
	return s.ring[(s.head-1-i+MaxSpikeCount)%MaxSpikeCount]
}

// SpikeLearner learns a channel's spike profile from its normal log
// (ChannelProfile.SpikeSize, SpikeMax and SpikeSpanFrames), one frame at a
// time, allocation-free: the scale of the frame-to-frame change as a
// running mean of its absolute value, and the largest count of spikes
// against that running scale within any SpikeSpan.
type SpikeLearner struct {
	span   int // SpikeSpan in frames
	step   float64
	sumAbs float64
	nd     int
	last   float64
	have   bool
	k      int64
	max    int
	tr     spikeTrack
}

// NewSpikeLearner returns a learner for frames of period.
func NewSpikeLearner(period time.Duration) SpikeLearner {
	span := 0
	if period > 0 {
		span = int(math.Ceil(float64(SpikeSpan) / float64(period)))
	}
	return SpikeLearner{span: span}
}

// Add learns the next frame's reading (ok false: missing); step is the
// channel's quantisation step as learned so far (0: none).
func (l *SpikeLearner) Add(v float64, ok bool, step float64) {
	l.k++
	if !ok || v != v {
		l.have = false
		l.tr.step(0, false, l.k, 0)
		return
	}
	if l.have {
		l.sumAbs += math.Abs(v - l.last)
		l.nd++
	}
	l.last, l.have = v, true
	l.step = step
	if l.nd < spikeLearnAfter {
		l.tr.step(v, true, l.k, math.Inf(1))
		return
	}
	l.tr.step(v, true, l.k, l.size())
	l.max = max(l.max, l.tr.count(l.k, l.span))
}

// size is the spike threshold at the current scale.
func (l *SpikeLearner) size() float64 {
	if l.nd == 0 {
		return math.Inf(1)
	}
	// σ of the change from its mean absolute value (×√(π/2)).
	sd := l.sumAbs / float64(l.nd) * math.Sqrt(math.Pi/2)
	return math.Max(SpikeK*sd, l.step)
}

// Profile sets the spike fields of p: none (SpikeSize 0) when the log was
// too short, the span unknown, the channel never changed, or it was
// spiky by nature (MaxSpikeCount spikes within a span).
func (l *SpikeLearner) Profile(p *ChannelProfile) {
	p.SpikeSize, p.SpikeMax, p.SpikeSpanFrames = 0, 0, 0
	if l.span < 3 || l.nd < spikeLearnAfter || l.max >= MaxSpikeCount-SpikeMargin {
		return
	}
	if s := l.size(); s > 0 && !math.IsInf(s, 0) {
		p.SpikeSize, p.SpikeMax, p.SpikeSpanFrames = s, l.max, l.span
	}
}
