package alerts

import (
	"math"
	"strings"
	"testing"
	"time"
)

// TestProfileCheck: the profiles a model file may carry. A negative spike
// count would hold a channel spiky on every frame and a longest flat run
// near the int limit would overflow the stuck threshold (every value
// stuck): the screen below shows both, and Check refuses them, naming the
// field. A profile the learner produced passes.
func TestProfileCheck(t *testing.T) {
	// What the unchecked fields do to the screen: a quality condition
	// after two readings, with no spike and a flat run of two frames.
	for _, p := range []ChannelProfile{
		{Channel: "a", Frames: 100, SpikeSize: 1, SpikeMax: -5, SpikeSpanFrames: 360},
		{Channel: "a", Frames: 100, MaxFlat: math.MaxInt - 1},
	} {
		s := NewScreen("u", []string{"a"}, []ChannelProfile{p})
		s.Step([]float64{1}, []bool{false})
		s.Step([]float64{1}, []bool{false})
		if q := s.AppendQuality(nil); len(q) == 0 {
			t.Errorf("profile %+v: the screen raises nothing; the case no longer shows what Check guards", p)
		}
		if err := p.Check(); err == nil {
			t.Errorf("profile %+v passes Check", p)
		}
	}
	bad := map[string]ChannelProfile{
		"frames":            {Frames: -1},
		"max_gap":           {Frames: 1, MaxGap: math.MaxInt32 + 1},
		"levels":            {Frames: 1, Levels: MaxLevels + 1},
		"rest":              {Frames: 1, Rest: make([]float64, MaxRest+1)},
		"step":              {Frames: 1, Step: math.NaN()},
		"spike_size":        {Frames: 1, SpikeSize: math.Inf(1)},
		"spike_max":         {Frames: 1, SpikeMax: MaxSpikeCount + 1},
		"spike_span_frames": {Frames: 1, SpikeSpanFrames: -3},
		"flat_tail":         {Frames: 1, FlatTail: 1e300},
	}
	for field, p := range bad {
		err := p.Check()
		if err == nil || !strings.Contains(err.Error(), field) {
			t.Errorf("%s: Check = %v, want an error naming it", field, err)
		}
	}
	// A learned spike profile passes.
	l := NewSpikeLearner(time.Second)
	for k := range 5000 {
		l.Add(math.Sin(float64(k)*0.37)+0.01*float64(k%7), true, 0)
	}
	p := ChannelProfile{Channel: "a", Frames: 5000, MaxFlat: 2, Levels: 0, Step: 0.01, Min: -1, Max: 1.1}
	l.Profile(&p)
	p.FlatTail = FlatTailScale([]int{12, 11, 10, 9, 8, 7, 6, 5, 4, 3, 2})
	if err := p.Check(); err != nil {
		t.Errorf("learned profile %+v: %v", p, err)
	}
}
