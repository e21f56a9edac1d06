package pipeline

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"hash/crc32"
	"log/slog"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
	"modewatch/tracker"
)

// TestMaxChannelsMessage: the configuration's check of model.max_channels
// states the p² coefficient of the engine's own estimate, UnitModelBytes
// (a·4 + 2b − 2(a + b) = 2a from its values at 2 and 1), so that a new
// measurement is not left behind in one of them.
func TestMaxChannelsMessage(t *testing.T) {
	a := (UnitModelBytes(2) - 2*UnitModelBytes(1)) / 2
	_, err := configs.Parse("m.yaml", []byte("model: {max_channels: 20000}\n"))
	if want := fmt.Sprintf("about %d·p² bytes", a); err == nil || !strings.Contains(err.Error(), want) {
		t.Errorf("max_channels 20000: %v, want it to say %q", err, want)
	}
}

// TestStateBoundPersist: the tracker state of a wide unit with the
// persistence weight on (model.persist, which keeps a copy of the residual
// factor) and the level steps' ring at its largest (filled) stays within
// the bound a model file's or checkpoint's state is checked against
// (maxStateBytes), with room to spare; the same unit without the weight is
// smaller, so the test sees the copy. TestStateBoundLevelRing checks the
// ring's share in a narrow unit, where it dominates.
func TestStateBoundPersist(t *testing.T) {
	if testing.Short() {
		t.Skip("builds trackers of 1000 channels")
	}
	for _, p := range []int{400, 1000} {
		size := func(persist float64) int {
			m := configs.DefaultModel()
			m.WarmUp = 100
			cfg, err := TrackerConfig(m, time.Second, p, false)
			if err != nil {
				t.Fatal(err)
			}
			cfg.Persist = persist // as the unit's learner sets it (location.go)
			// A full-rank covariance and a full ring.
			return len(noiseState(t, p, cfg, max(3*p/2, 100+2*tracker.MaxLevelStepFrames), 2))
		}
		on, off := size(3.5), size(-1)
		t.Logf("p=%d: state %.1f·p² with the weight, %.1f·p² without; bound %.1f·p²", p,
			float64(on)/float64(p*p), float64(off)/float64(p*p), float64(maxStateBytes(p))/float64(p*p))
		if on <= off {
			t.Errorf("p=%d: state %d bytes with the weight, %d without: the copy of the factor is not in it", p, on, off)
		}
		if float64(on) > 0.9*float64(maxStateBytes(p)) {
			t.Errorf("p=%d: state %d bytes with the weight, bound %d: less than 10 %% to spare", p, on, maxStateBytes(p))
		}
	}
}

// noiseState returns the tracker state of p channels under cfg, with the
// level steps' ring at its largest, after n frames of independent standard
// normal invented readings (seeded).
func noiseState(t *testing.T, p int, cfg tracker.Config, n int, seed uint64) []byte {
	t.Helper()
	cfg.LevelStep = tracker.MaxLevelStepFrames
	tr, err := tracker.New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, uint64(p)))
	x := make([]float64, p)
	var sc tracker.Score
	for k := 0; k < n; k++ {
		for i := range x {
			x[i] = rng.NormFloat64()
		}
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
	}
	st, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	return st
}

// TestStateBoundLevelRing: the state of a narrow unit (20 channels,
// where the ring outweighs the p² terms) with the level steps' ring at its
// largest and filled stays within maxStateBytes, and is refused by
// checkState only beyond it.
func TestStateBoundLevelRing(t *testing.T) {
	const p = 20
	m := configs.DefaultModel()
	m.WarmUp = 100
	cfg, err := TrackerConfig(m, time.Second, p, false)
	if err != nil {
		t.Fatal(err)
	}
	st := noiseState(t, p, cfg, 100+2*tracker.MaxLevelStepFrames+10, 3)
	if ring := 8 * 2 * tracker.MaxLevelStepFrames * p; len(st) < ring {
		t.Fatalf("state %d bytes, less than its ring alone (%d): the ring is not in it", len(st), ring)
	}
	if err := checkState("u", st, p); err != nil {
		t.Errorf("state of %d bytes refused (bound %d): %v", len(st), maxStateBytes(p), err)
	}
}

// TestUnitModelBytes checks the memory estimate against the live heap of
// a tracker of p channels after warm-up under the default settings
// (standard normal invented data), with the level steps' ring at its
// largest, within 25 %.
func TestUnitModelBytes(t *testing.T) {
	if testing.Short() {
		t.Skip("builds trackers of 800 channels")
	}
	for _, p := range []int{400, 800} {
		m := configs.DefaultModel()
		m.WarmUp = 100
		cfg, err := TrackerConfig(m, time.Second, p, false)
		if err != nil {
			t.Fatal(err)
		}
		cfg.LevelStep = tracker.MaxLevelStepFrames
		runtime.GC()
		var m0, m1 runtime.MemStats
		runtime.ReadMemStats(&m0)
		tr, err := tracker.New(p, cfg)
		if err != nil {
			t.Fatal(err)
		}
		rng := rand.New(rand.NewPCG(1, uint64(p)))
		x := make([]float64, p)
		var sc tracker.Score
		for k := 0; k < 200; k++ {
			for i := range x {
				x[i] = rng.NormFloat64()
			}
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
		}
		runtime.GC()
		runtime.ReadMemStats(&m1)
		runtime.KeepAlive(tr)
		got, est := float64(m1.HeapAlloc)-float64(m0.HeapAlloc), float64(UnitModelBytes(p))
		if math.Abs(got-est) > 0.25*got {
			t.Errorf("p=%d: heap %.1f MB, estimate %.1f MB", p, got/1e6, est/1e6)
		}
		t.Logf("p=%d: heap %.1f MB, estimate %.1f MB", p, got/1e6, est/1e6)
	}
}

// unitCheckpoint returns the checkpoint of one unit of the demo plant
// (invented data, two hours, warm-up 100 frames) and the configuration.
func unitCheckpoint(t testing.TB) (*ModelFile, *configs.Config, *stream.Channels) {
	t.Helper()
	cfg, ch, frames := demoFrames(t, 2*time.Hour, configs.Model{WarmUp: 100})
	p, err := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
	if err != nil {
		t.Fatal(err)
	}
	for i := range frames {
		if err := p.Frame(&frames[i]); err != nil {
			t.Fatal(err)
		}
	}
	ck, err := p.CheckpointUnit(p.Units()[0].Name)
	if err != nil {
		t.Fatal(err)
	}
	return ck, cfg, ch
}

// restoreBody decodes body and restores it into a fresh pipeline; it
// returns the error (nil when the unit was taken over) and the bytes
// allocated meanwhile, an upper bound on the heap's growth.
func restoreBody(t testing.TB, body []byte, cfg *configs.Config, ch *stream.Channels) (error, uint64) {
	t.Helper()
	p, err := New(Options{Config: cfg, Channels: ch, Period: 20 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	var m0, m1 runtime.MemStats
	runtime.ReadMemStats(&m0)
	ck, err := DecodeModel(bytes.NewReader(body))
	if err == nil {
		var errs []error
		var names []string
		if len(ck.Units) != 1 {
			err = fmt.Errorf("%d units", len(ck.Units))
		} else if names, errs = p.Restore([]*ModelFile{ck}); len(names) == 0 {
			err = fmt.Errorf("%v", errs)
			if p.Unit(ck.Units[0].Name) != nil {
				t.Errorf("refused checkpoint left unit %q behind", ck.Units[0].Name)
			}
		}
	}
	runtime.ReadMemStats(&m1)
	return err, m1.TotalAlloc - m0.TotalAlloc
}

// withLastAt dates m's first carried reading at; it adds one for the
// unit's first channel if m carries none.
func withLastAt(m *ModelFile, at time.Time) *ModelFile {
	mu := &m.Units[0]
	if len(mu.Last) == 0 {
		mu.Last = []LastReading{{Channel: mu.Channels[0], Value: 1}}
	}
	mu.Last[0].Time = at
	return m
}

// withCalibration gives m's first unit a calibration as fit states it (a
// rate of 0.5 a day from 3 held-out alerts over 4 days, its week
// predicted by Predict), edited by edit.
func withCalibration(m *ModelFile, edit func(c *Calibration)) *ModelFile {
	c := &Calibration{Scale: 1.2, Budget: 0.5, Rate: 0.5, RateSE: 0.25, RateLow: 0.15, RateHigh: 1.2, GEVRate: 0.3,
		Observed: 3, HeldOutDays: 4, Blocks: 20}
	w := c.Predict(PredictWeekDays)
	c.Week = &w
	edit(c)
	m.Units[0].Calibration = c
	return m
}

// TestHostileCheckpoints: unit checkpoints made to hurt (a huge channel
// list, huge dimensions in the tracker state, NaN, truncation, corrupt
// bytes, a calibration no fit states) are refused with their reason,
// leave no unit behind, and the bytes allocated on the way (TotalAlloc,
// which bounds the peak heap's growth) stay within a few times the body,
// far below what the sizes they name would take.
func TestHostileCheckpoints(t *testing.T) {
	good, cfg, ch := unitCheckpoint(t)
	enc := func(m *ModelFile) []byte {
		b, err := json.Marshal(m)
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	clone := func() *ModelFile {
		var m ModelFile
		if err := json.Unmarshal(enc(good), &m); err != nil {
			t.Fatal(err)
		}
		return &m
	}
	withState := func(m *ModelFile, edit func(st []byte) []byte) *ModelFile {
		st := edit(append([]byte(nil), m.Units[0].State...))
		binary.LittleEndian.PutUint32(st[len(st)-4:], crc32.ChecksumIEEE(st[:len(st)-4]))
		m.Units[0].State = st
		return m
	}
	if err, _ := restoreBody(t, enc(good), cfg, ch); err != nil {
		t.Fatalf("the unmodified checkpoint is refused: %v", err)
	}
	if err, _ := restoreBody(t, enc(withCalibration(clone(), func(*Calibration) {})), cfg, ch); err != nil {
		t.Fatalf("the checkpoint with a calibration as fit states it is refused: %v", err)
	}
	cases := []struct {
		name string
		body func() []byte
		want string
	}{
		{"200000 channels", func() []byte {
			m := clone()
			m.Units[0].Channels = make([]string, 200000)
			for i := range m.Units[0].Channels {
				m.Units[0].Channels[i] = fmt.Sprintf("c%d", i)
			}
			return enc(m)
		}, "over this unit's cap of 2000"},
		{"state of a billion channels", func() []byte {
			return enc(withState(clone(), func(st []byte) []byte { binary.LittleEndian.PutUint32(st[6:], 1e9); return st }))
		}, "tracker state for 1000000000 channels"},
		{"state over its size", func() []byte {
			m := clone()
			m.Units[0].State = append(m.Units[0].State, make([]byte, 4<<20)...)
			return enc(m)
		}, "too long for"},
		{"NaN mean", func() []byte {
			return enc(withState(clone(), func(st []byte) []byte {
				binary.LittleEndian.PutUint64(st[51:], math.Float64bits(math.NaN())) // first mean: after 51 header bytes (version 2)
				return st
			}))
		}, "is NaN"},
		{"state truncated", func() []byte {
			m := clone()
			m.Units[0].State = m.Units[0].State[:len(m.Units[0].State)/2]
			return enc(m)
		}, "truncated"},
		{"state corrupt", func() []byte {
			m := clone()
			m.Units[0].State[len(m.Units[0].State)/2] ^= 0xff
			return enc(m)
		}, "checksum"},
		{"JSON truncated", func() []byte { b := enc(good); return b[:len(b)/2] }, "not a model file"},
		{"channel twice", func() []byte {
			m := clone()
			m.Units[0].Channels[1] = m.Units[0].Channels[0]
			return enc(m)
		}, "listed twice"},
		{"carried reading of a stranger", func() []byte {
			m := clone()
			m.Units[0].Last = append(m.Units[0].Last, LastReading{Channel: "nobody", Value: 1})
			return enc(m)
		}, "not one of the unit's"},
		// Event times whose nanoseconds do not fit an int64 (before 1678,
		// after 2262), and the zero time (year 1): refused, never used as
		// a seed.
		{"carried reading in 1600", func() []byte { return enc(withLastAt(clone(), time.Date(1600, 1, 1, 0, 0, 0, 0, time.UTC))) },
			"event time out of range"},
		{"carried reading in 2300", func() []byte { return enc(withLastAt(clone(), time.Date(2300, 1, 1, 0, 0, 0, 0, time.UTC))) },
			"event time out of range"},
		{"carried reading at the zero time", func() []byte { return enc(withLastAt(clone(), time.Time{})) }, "at 0001-01-01T00:00:00Z"},
		{"screen run of a stranger", func() []byte {
			m := clone()
			m.Units[0].Screen = []alerts.ChannelRun{{Channel: "nobody", Flat: 3}}
			return enc(m)
		}, "screen run 0 names channel"},
		{"screen runs over the channels", func() []byte {
			m := clone()
			m.Units[0].Screen = make([]alerts.ChannelRun, len(m.Units[0].Channels)+1)
			return enc(m)
		}, "screen runs for"},
		// A recentring (an accepted incident's channels, or all of them
		// at a new operating point) of more names than the unit has: the
		// restore would look each channel up in a list as long as the
		// body allows.
		{"recentring over the channels", func() []byte {
			m := clone()
			m.Units[0].Recentre = &RecentreState{Channels: append(slices.Clone(m.Units[0].Channels), "extra")}
			return enc(m)
		}, "recentres"},
		// A calibration's stated rate and the week's prediction (fit
		// writes them; they are carried into every checkpoint).
		{"calibration rate SE negative", func() []byte { return enc(withCalibration(clone(), func(c *Calibration) { c.RateSE = -1 })) },
			"calibration: rate_se_per_day -1"},
		{"calibration GEV rate negative", func() []byte { return enc(withCalibration(clone(), func(c *Calibration) { c.GEVRate = -0.5 })) },
			"calibration: gev_rate_per_day -0.5"},
		{"calibration interval upside down", func() []byte {
			return enc(withCalibration(clone(), func(c *Calibration) { c.RateLow, c.RateHigh = 2, 1 }))
		}, "rate_low_per_day 2 above rate_high_per_day 1"},
		{"predicted week of no days", func() []byte { return enc(withCalibration(clone(), func(c *Calibration) { c.Week.Days = 0 })) },
			"predicted_week: days 0"},
		{"predicted week upside down", func() []byte {
			return enc(withCalibration(clone(), func(c *Calibration) { c.Week.Low, c.Week.High = 9, 2 }))
		}, "predicted_week: interval [9, 2]"},
		{"predicted week negative", func() []byte { return enc(withCalibration(clone(), func(c *Calibration) { c.Week.Low = -3 })) },
			"predicted_week: interval [-3,"},
		{"predicted week coverage over 1", func() []byte { return enc(withCalibration(clone(), func(c *Calibration) { c.Week.Coverage = 1.5 })) },
			"predicted_week: coverage 1.5"},
		{"screen spikes out of order", func() []byte {
			m := clone()
			m.Units[0].Screen = []alerts.ChannelRun{{Channel: m.Units[0].Channels[0], Spikes: []int64{5, 5}}}
			return enc(m)
		}, "not positive and ascending"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			body := c.body()
			err, alloc := restoreBody(t, body, cfg, ch)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("err %v, want %q", err, c.want)
			}
			if limit := uint64(8*len(body)) + 16<<20; alloc > limit {
				t.Errorf("allocated %d bytes for a body of %d (limit %d)", alloc, len(body), limit)
			}
			t.Logf("body %d bytes, allocated %.1f MB: %v", len(body), float64(alloc)/1e6, err)
		})
	}
}

// TestUnitChannelCap: a unit at model.max_channels refuses further
// channels, logs each once, counts them and shows them on its view.
func TestUnitChannelCap(t *testing.T) {
	var lines bytes.Buffer
	for k := 0; k < 30; k++ {
		fmt.Fprintf(&lines, "cap a=%d,b=%d,c=%d,d=%d,e=%d %d\n", k, k%3, k%5, k%7, k%11, int64(k)*int64(time.Second))
	}
	_, frames := collectFrames(t, lines.Bytes(), time.Second)
	ch2, _ := collectFrames(t, lines.Bytes(), time.Second)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 10, MaxChannels: 3}}
	cfg.ApplyDefaults()
	var log bytes.Buffer
	p, err := New(Options{Config: cfg, Channels: ch2, Period: time.Second, Log: slog.New(slog.NewTextHandler(&log, nil))})
	if err != nil {
		t.Fatal(err)
	}
	for i := range frames {
		if err := p.Frame(&frames[i]); err != nil {
			t.Fatal(err)
		}
	}
	v := p.Views()[0]
	if len(v.Channels) != 3 || v.RefusedChannels != 2 || len(v.RefusedExamples) != 2 || v.MaxChannels != 3 {
		t.Fatalf("view: channels %v, refused %d %v, cap %d", v.Channels, v.RefusedChannels, v.RefusedExamples, v.MaxChannels)
	}
	if n := strings.Count(log.String(), "channel refused"); n != 2 {
		t.Errorf("%d refusal log lines, want 2 (once per name):\n%s", n, log.String())
	}
	if v.MemoryBytes != UnitModelBytes(3) {
		t.Errorf("memory %d, want %d", v.MemoryBytes, UnitModelBytes(3))
	}
}

// FuzzModelFile feeds arbitrary bytes to the checkpoint reader and, when
// they decode, to Restore under a channel cap of 64: nothing may panic,
// and a unit is taken over only from a checkpoint that passes every check.
// Minimizing a 6 KB input takes long; bound it:
//
//	go test -run XXX -fuzz FuzzModelFile -fuzztime 2m -fuzzminimizetime 2s
func FuzzModelFile(f *testing.F) {
	// A small unit (invented readings, 4 channels, 60 frames) keeps each
	// execution quick.
	var lines bytes.Buffer
	for k := 0; k < 60; k++ {
		fmt.Fprintf(&lines, "fz a=%d,b=%g,c=%g,d=%d %d\n", k%13, math.Sin(float64(k)), math.Cos(float64(k)/3), k%7, int64(k)*int64(20*time.Second))
	}
	ch, frames := collectFrames(f, lines.Bytes(), 20*time.Second)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 30}}
	cfg.ApplyDefaults()
	src, err := New(Options{Config: cfg, Channels: ch, Period: 20 * time.Second})
	if err != nil {
		f.Fatal(err)
	}
	for i := range frames {
		if err := src.Frame(&frames[i]); err != nil {
			f.Fatal(err)
		}
	}
	good, err := src.CheckpointUnit("fz")
	if err != nil {
		f.Fatal(err)
	}
	b, _ := json.Marshal(good)
	f.Add(b)
	f.Add(b[:len(b)/2])
	f.Add([]byte(`{"format":"modewatch-model","version":1,"period":"20s","units":[{"name":"x","channels":["a"],"state":"TVdUSwIAAQAAAA=="}]}`))
	cfg.Model.MaxChannels = 64
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := New(Options{Config: cfg, Channels: ch, Period: 20 * time.Second, Log: slog.New(slog.DiscardHandler)})
		if err != nil {
			t.Fatal(err)
		}
		ck, err := DecodeModel(bytes.NewReader(data))
		if err != nil || len(ck.Units) != 1 {
			return
		}
		names, _ := p.Restore([]*ModelFile{ck})
		if len(names) == 1 {
			v := p.Unit(names[0]).View(time.Time{})
			if len(v.Channels) > 64 {
				t.Fatalf("unit of %d channels over the cap", len(v.Channels))
			}
		}
	})
}
