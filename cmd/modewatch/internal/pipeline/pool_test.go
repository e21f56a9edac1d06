package pipeline

import (
	"bytes"
	"fmt"
	"runtime"
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/sim"
	"modewatch/stream"
)

// TestWorkersSameResult: scoring the demo plant (invented data, 4 units)
// with 1, 2 and 5 workers gives bit-identical scores per unit and the same
// alert record revisions in the same order (the parallel part touches only
// each unit's own tracker; the alarm engine is fed in unit order).
func TestWorkersSameResult(t *testing.T) {
	cfg, ch, frames := demoFrames(t, 4*time.Hour, configs.Model{WarmUp: 100})
	type run struct {
		scores map[string][]scoreRec
		pubs   []unitPub
	}
	runWith := func(workers int) run {
		r, opt := newRecorderOpts(cfg, ch, demoPeriod)
		var pubs []unitPub
		opt.Publisher = alerts.PublisherFunc(func(a *alerts.Record) {
			pubs = append(pubs, unitPub{a.ID, a.Revision, a.Updated, a.End != nil})
		})
		opt.Workers = workers
		p, err := New(opt)
		if err != nil {
			t.Fatal(err)
		}
		defer p.Close()
		if got := p.Workers(); got != max(workers, 1) {
			t.Fatalf("Workers() = %d, want %d", got, max(workers, 1))
		}
		runFrames(t, p, frames, nil)
		return run{r.scores, pubs}
	}
	want := runWith(1)
	if len(want.pubs) == 0 {
		t.Fatal("the reference run published no alert record; the comparison would prove little")
	}
	for _, w := range []int{2, 5} {
		t.Run(fmt.Sprintf("workers=%d", w), func(t *testing.T) {
			got := runWith(w)
			if len(got.scores) != len(want.scores) {
				t.Fatalf("%d units scored, want %d", len(got.scores), len(want.scores))
			}
			for name, ws := range want.scores {
				gs := got.scores[name]
				if len(gs) != len(ws) {
					t.Errorf("unit %s: %d frames scored, want %d", name, len(gs), len(ws))
					continue
				}
				if k := sameScores(gs, ws); k >= 0 {
					t.Errorf("unit %s: scores differ from one worker's at frame %d", name, k)
				}
			}
			if len(got.pubs) != len(want.pubs) {
				t.Fatalf("%d record revisions, want %d", len(got.pubs), len(want.pubs))
			}
			for i := range want.pubs {
				if got.pubs[i] != want.pubs[i] {
					t.Fatalf("record revision %d: %+v, want %+v", i, got.pubs[i], want.pubs[i])
				}
			}
		})
	}
}

// TestWorkersPlacement: every unit has exactly one worker, and a unit
// keeps it from frame to frame; Close leaves a pipeline that still scores.
func TestWorkersPlacement(t *testing.T) {
	_, ch, frames := demoFrames(t, time.Hour, configs.Model{})
	p, err := New(Options{Channels: ch, Period: demoPeriod, Workers: 3})
	if err != nil {
		t.Fatal(err)
	}
	half := len(frames) / 2
	runFrames(t, p, frames[:half], nil)
	first := map[string]int{}
	for _, u := range p.Units() {
		if !u.placed() {
			t.Fatalf("unit %s has no worker", u.Name)
		}
		first[u.Name] = u.worker
	}
	seen := map[*Unit]int{}
	for i := range p.pool.workers {
		for _, u := range p.pool.workers[i].units {
			seen[u]++
		}
	}
	if len(seen) != len(first) {
		t.Errorf("%d units on workers, want %d", len(seen), len(first))
	}
	for u, n := range seen {
		if n != 1 {
			t.Errorf("unit %s on %d workers", u.Name, n)
		}
	}
	runFrames(t, p, frames[half:], nil)
	for _, u := range p.Units() {
		if u.worker != first[u.Name] {
			t.Errorf("unit %s moved from worker %d to %d", u.Name, first[u.Name], u.worker)
		}
	}
	p.Close()
	p.Close() // idempotent
	before := p.Units()[0].frames
	last := frames[len(frames)-1]
	last.Start = last.Start.Add(demoPeriod)
	if err := p.Frame(&last); err != nil {
		t.Fatal(err)
	}
	if p.Units()[0].frames != before+1 {
		t.Error("a frame after Close was not scored")
	}
}

// TestWorkersFrameAllocs: handing a frame to the workers and waiting for
// them allocates nothing: the same frames cost as many allocations with 2
// workers as with 1 (the frames of the demo plant may allocate on their
// own, for alert records).
func TestWorkersFrameAllocs(t *testing.T) {
	if raceOn {
		t.Skip("the race detector allocates on channel hand-overs")
	}
	cfg, ch, frames := demoFrames(t, 2*time.Hour, configs.Model{WarmUp: 100})
	allocs := func(workers int) float64 {
		p, err := New(Options{Config: cfg, Channels: ch, Period: demoPeriod, Workers: workers})
		if err != nil {
			t.Fatal(err)
		}
		defer p.Close()
		runFrames(t, p, frames, nil)
		f := frames[len(frames)-1]
		k := 0
		step := func() {
			k++
			// Replay the last quarter's frames shifted past the end.
			src := &frames[len(frames)*3/4+k%(len(frames)/4)]
			f.Values, f.Missing = src.Values, src.Missing
			f.Start = f.Start.Add(demoPeriod)
			if err := p.Frame(&f); err != nil {
				t.Fatal(err)
			}
		}
		step()
		return testing.AllocsPerRun(100, step)
	}
	one, two := allocs(1), allocs(2)
	if two != one {
		t.Errorf("Frame allocates %v times per frame with 2 workers, %v with 1", two, one)
	}
}

// largeFrames returns the aligned frames of the first hours of the
// 1,000-channel scenario (configs/scenario-large.yaml: 5 units of 200
// channels at 10 s; invented data).
func largeFrames(b testing.TB, hours int) (*stream.Channels, []stream.Frame) {
	s, err := sim.Load("../../../../configs/scenario-large.yaml")
	if err != nil {
		b.Fatal(err)
	}
	s.Duration = time.Duration(hours) * time.Hour
	var buf bytes.Buffer
	if err := s.WriteLineProtocol(&buf); err != nil {
		b.Fatal(err)
	}
	return collectFrames(b, buf.Bytes(), s.Period)
}

// BenchmarkFrameWorkers is the whole per-frame path on the 1,000-channel
// scenario in two pipelines, one with 1 worker and one with GOMAXPROCS
// workers, fed the same frames in alternating blocks of 64 so that both
// see the same load from other processes on a shared machine. It reports
// each one's frames/s, the ratio of their totals (the gain of the worker
// pool) and the median over blocks of the per-block ratio. The models
// learn the first hour; the next hour's frames are cycled, shifted in time.
func BenchmarkFrameWorkers(b *testing.B) {
	const block = 64
	ch, frames := largeFrames(b, 2)
	warm := len(frames) / 2
	cfg := &configs.Config{Model: configs.Model{WarmUp: 200}}
	cfg.ApplyDefaults()
	var pls [2]*Pipeline
	for k, w := range []int{1, runtime.GOMAXPROCS(0)} {
		p, err := New(Options{Config: cfg, Channels: ch, Period: 10 * time.Second, Workers: w})
		if err != nil {
			b.Fatal(err)
		}
		defer p.Close()
		for i := range frames[:warm] {
			if err := p.Frame(&frames[i]); err != nil {
				b.Fatal(err)
			}
		}
		pls[k] = p
	}
	rest := frames[warm:]
	span := rest[len(rest)-1].Start.Sub(rest[0].Start) + 10*time.Second
	var f [2]stream.Frame
	var total [2]time.Duration
	var ratios []float64
	n := 0
	b.ReportAllocs()
	b.ResetTimer()
	for n < b.N {
		m := min(block, b.N-n)
		var took [2]time.Duration
		for k, p := range pls {
			t0 := time.Now()
			for i := n; i < n+m; i++ {
				src := &rest[i%len(rest)]
				f[k].Values, f[k].Missing = src.Values, src.Missing
				f[k].Start = src.Start.Add(time.Duration(i/len(rest)+1) * span)
				if err := p.Frame(&f[k]); err != nil {
					b.Fatal(err)
				}
			}
			took[k] = time.Since(t0)
			total[k] += took[k]
		}
		if m == block {
			ratios = append(ratios, float64(took[0])/float64(took[1]))
		}
		n += m
	}
	b.StopTimer()
	for _, p := range pls {
		for _, u := range p.Units() {
			if u.frames != uint64(warm+b.N) || !u.score.Ready {
				b.Fatalf("unit %s scored %d frames (ready %v), want %d", u.Name, u.frames, u.score.Ready, warm+b.N)
			}
		}
	}
	b.ReportMetric(float64(b.N)/total[0].Seconds(), "frames/s(1)")
	b.ReportMetric(float64(b.N)/total[1].Seconds(), "frames/s(GOMAXPROCS)")
	b.ReportMetric(float64(total[0])/float64(total[1]), "speedup")
	if len(ratios) > 0 {
		slices.Sort(ratios)
		b.ReportMetric(ratios[len(ratios)/2], "speedup(median)")
	}
	benchSink = pls[1].Units()[0].Score().T2
}
