package pipeline

import (
	"testing"
	"time"

	"modewatch/configs"
	"modewatch/stream"
)

// benchSetup returns a pipeline over the demo plant (4 units, 50 channels;
// invented data) whose models have learned the first two hours, and the
// aligned frames of the next four hours.
func benchSetup(b *testing.B) (*Pipeline, []stream.Frame) {
	cfg, ch, frames := demoFrames(b, 6*time.Hour, configs.Model{WarmUp: 100})
	p, err := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
	if err != nil {
		b.Fatal(err)
	}
	warm := len(frames) / 3
	for i := range frames[:warm] {
		if err := p.Frame(&frames[i]); err != nil {
			b.Fatal(err)
		}
	}
	return p, frames[warm:]
}

var benchSink float64

// BenchmarkFrame is the whole per-frame path of the service for the demo
// plant: split by unit, four tracker steps (scores, contributions,
// amortised refresh), observations for the alarm engine. The recorded
// frames are cycled, shifted in time.
func BenchmarkFrame(b *testing.B) {
	p, frames := benchSetup(b)
	span := frames[len(frames)-1].Start.Sub(frames[0].Start) + 20*time.Second
	start := make([]time.Time, len(frames))
	for i := range frames {
		start[i] = frames[i].Start
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		k := i % len(frames)
		f := &frames[k]
		f.Start = start[k].Add(time.Duration(i/len(frames)) * span)
		if err := p.Frame(f); err != nil {
			b.Fatal(err)
		}
	}
	benchSink = p.Units()[0].Score().T2
}

// BenchmarkTrackersOnly steps the same four trackers directly on the same
// frames: the baseline that shows the pipeline's own cost (the ratio
// BenchmarkFrame / BenchmarkTrackersOnly).
func BenchmarkTrackersOnly(b *testing.B) {
	p, frames := benchSetup(b)
	units := p.Units()
	type unitFrames struct {
		x    [][]float64
		miss [][]bool
	}
	per := make([]unitFrames, len(units))
	for k, u := range units {
		for i := range frames {
			x := make([]float64, len(u.idx))
			m := make([]bool, len(u.idx))
			frames[i].Gather(x, m, nil, u.idx)
			per[k].x = append(per[k].x, x)
			per[k].miss = append(per[k].miss, m)
		}
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		j := i % len(frames)
		for k, u := range units {
			if err := u.tr.Step(&u.score, per[k].x[j], per[k].miss[j]); err != nil {
				b.Fatal(err)
			}
		}
	}
	benchSink = units[0].score.T2
}
