package alerts

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"
)

// spikeChannel draws a 5 s reading: a slow wander (AR(1), time constant
// 2 h, σ 2) plus white noise of σ noise, quantised to 0.1, and a valve
// that steps the level by −6 now and then (a step is not a spike).
type spikeChannel struct {
	rng      *rand.Rand
	w        float64
	valve    float64
	noise    float64
	spikeP   float64 // probability per frame of a spike of ±spike
	spike    float64
	stepLeft int
}

func (c *spikeChannel) next() float64 {
	const phi = 0.99930579 // exp(−5 s / 2 h)
	c.w = phi*c.w + 2*math.Sqrt(1-phi*phi)*c.rng.NormFloat64()
	if c.stepLeft == 0 && c.rng.Float64() < 1.0/720 { // about one valve move an hour
		c.valve = -6 - c.valve // toggles between 0 and −6
		c.stepLeft = 480       // held at least 40 min
	}
	if c.stepLeft > 0 {
		c.stepLeft--
	}
	v := 45 + c.w + c.valve + c.noise*c.rng.NormFloat64()
	if c.spikeP > 0 && c.rng.Float64() < c.spikeP {
		if c.rng.IntN(2) == 0 {
			v += c.spike
		} else {
			v -= c.spike
		}
	}
	return math.Round(v*10) / 10
}

// TestSpikeRule: a channel's spike profile learned from 7 normal days at
// 5 s frames (a wandering level with valve steps and noise σ 1.2) raises
// no spike condition over 30 further normal days, and raises it within
// 40 minutes of spikes of ±9 at 20 an hour (the realism suite's scrubber
// level: about 2.8 of the level's overall σ) and of a noise increase ×4,
// while the valve's steps of 6 are never spikes. The test of a reading
// against both neighbours and the count's margin are design choices; the
// scale uses E|Δ| = 2σ/√π for the change Δ of Gaussian noise (σ√2).
func TestSpikeRule(t *testing.T) {
	const period = 5 * time.Second
	const day = 17280
	ch := &spikeChannel{rng: rand.New(rand.NewPCG(3, 8)), noise: 1.2}
	l := NewSpikeLearner(period)
	step := 0.1
	for range 7 * day {
		l.Add(ch.next(), true, step)
	}
	prof := ChannelProfile{Channel: "u.level", Frames: 7 * day, Min: 0, Max: 100, MaxFlat: 50}
	l.Profile(&prof)
	if !(prof.SpikeSize > 0) || prof.SpikeSpanFrames != 720 {
		t.Fatalf("no spike rule learned: %+v", prof)
	}
	// Gaussian noise σ 1.2: the change has σ 1.2·√2, so the size is about
	// 3.5·1.70 = 5.9 (the wander and the steps add a little).
	if prof.SpikeSize < 5.5 || prof.SpikeSize > 7 {
		t.Errorf("spike size %.2f, want about 5.9", prof.SpikeSize)
	}
	run := func(frames int) (first int) {
		s := NewScreen("u", []string{"u.level"}, []ChannelProfile{prof})
		x, miss := make([]float64, 1), make([]bool, 1)
		var q []Quality
		for k := range frames {
			x[0] = ch.next()
			s.Step(x, miss)
			q = s.AppendQuality(q[:0])
			for _, c := range q {
				if c.Kind == QualitySpikes {
					return k
				}
			}
		}
		return -1
	}
	t.Logf("learned: size %.2f, at most %d spikes in %d frames", prof.SpikeSize, prof.SpikeMax, prof.SpikeSpanFrames)
	if k := run(30 * day); k >= 0 {
		t.Errorf("spike condition on normal data at frame %d (%.1f days in)", k, float64(k)/day)
	}
	ch.spikeP, ch.spike = 20.0/720, 9
	k := run(8 * 720)
	t.Logf("spikes: condition after %d frames", k)
	if k < 0 || k > 480 {
		t.Errorf("spikes ±9 at 20 an hour: condition at frame %d, want within 480 frames (40 min)", k)
	}
	ch.spikeP, ch.noise = 0, 4.8
	k = run(8 * 720)
	t.Logf("noise ×4: condition after %d frames", k)
	if k < 0 || k > 480 {
		t.Errorf("noise ×4: condition at frame %d, want within 480 frames (40 min)", k)
	}
}

// TestSpikeTrack: a spike is a reading above both neighbours (or below
// both) by more than the size; a step, a ramp and a reading next to a
// missing one are not.
func TestSpikeTrack(t *testing.T) {
	nan := math.NaN()
	for _, c := range []struct {
		name string
		x    []float64
		want int
	}{
		{"spike up", []float64{0, 0, 5, 0, 0}, 1},
		{"spike down", []float64{0, 0, -5, 0, 0}, 1},
		{"too small", []float64{0, 0, 2.9, 0, 0}, 0},
		{"step", []float64{0, 0, 5, 5, 5}, 0},
		{"ramp", []float64{0, 4, 8, 12, 16}, 0},
		{"next to missing", []float64{0, nan, 5, 0, 0}, 0},
		{"two spikes", []float64{0, 5, 0, -5, 0}, 2},
	} {
		var s spikeTrack
		n := 0
		for k, v := range c.x {
			if s.step(v, !math.IsNaN(v), int64(k+1), 3) {
				n++
			}
		}
		if n != c.want || s.count(int64(len(c.x)), 100) != c.want {
			t.Errorf("%s: %d spikes (count %d), want %d", c.name, n, s.count(int64(len(c.x)), 100), c.want)
		}
	}
}

// TestSpikeScreenAllocs: the spike rule adds no allocation per frame.
func TestSpikeScreenAllocs(t *testing.T) {
	prof := []ChannelProfile{{Channel: "u.a", Frames: 1000, MaxFlat: 5, Min: 0, Max: 100, SpikeSize: 1, SpikeMax: 2, SpikeSpanFrames: 720}}
	s := NewScreen("u", []string{"u.a"}, prof)
	x, miss := []float64{50}, []bool{false}
	q := make([]Quality, 0, 4)
	k := 0
	allocs := testing.AllocsPerRun(2000, func() {
		k++
		x[0] = 50
		if k%3 == 0 {
			x[0] = 60 // a spike every third frame: the rule is in alarm
		}
		s.Step(x, miss)
		q = s.AppendQuality(q[:0])
	})
	if allocs != 0 {
		t.Errorf("%v allocations per frame", allocs)
	}
	if len(q) == 0 || q[0].Kind != QualitySpikes {
		t.Errorf("conditions %v, want spikes", q)
	}
}

// TestSpikeCountMargin: with a normal log that had at most `most` spikes
// within the span, the channel is in alarm once the span holds more than
// most + SpikeMargin spikes and its last quarter more than a quarter of
// that, and not before (the rule's definition; the margin is a design
// choice made on the realism suite).
func TestSpikeCountMargin(t *testing.T) {
	const span, now = 180, 1000 // an hour at 20 s
	// spikes returns n spike frames, gap apart, the newest at last.
	spikes := func(n int, last, gap int64) []int64 {
		f := make([]int64, n)
		for i := range f {
			f[i] = last - int64(n-1-i)*gap
		}
		return f
	}
	for _, most := range []int{0, 2} {
		lim := most + SpikeMargin
		for _, c := range []struct {
			name   string
			spikes []int64
			want   bool
		}{
			{"the margin reached, not passed", spikes(lim, now-1, 10), false},
			{"one past the margin, recent", spikes(lim+1, now-1, 10), true},
			{"one past the margin, none in the last quarter", spikes(lim+1, now-span/4-1, 5), false},
			{"one past the margin, the oldest before the span", append([]int64{now - span - 1}, spikes(lim, now-1, 10)...), false},
		} {
			var s spikeTrack
			for _, k := range c.spikes {
				s.ring[s.head] = k
				s.head = (s.head + 1) % MaxSpikeCount
				s.n++
			}
			if got := s.inAlarm(now, span, most); got != c.want {
				t.Errorf("%s: most %d, spikes at %v, now %d: in alarm %v, want %v", c.name, most, c.spikes, now, got, c.want)
			}
		}
	}
}
