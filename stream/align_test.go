package stream

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"
)

// t0 is a whole second, the origin of the hand-built sequences.
var t0 = time.Unix(1_700_000_000, 0).UTC()

func at(sec float64) time.Time { return t0.Add(time.Duration(math.Round(sec * 1e9))) }

type reading struct {
	c int
	t float64 // seconds after t0
	v float64
}

type wantFrame struct {
	start   float64   // seconds after t0
	values  []float64 // NaN: missing
	segment int
}

var nan = math.NaN()

// alignAll runs the readings in through a new Aligner of two channels
// under cfg and flushes it; it returns the Aligner and the frames it
// emitted.
func alignAll(t *testing.T, cfg AlignConfig, in []reading) (*Aligner, *sink) {
	t.Helper()
	s := &sink{}
	a, err := NewAligner(cfg, 2, s.handle)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range in {
		if _, err := a.Add(r.c, at(r.t), r.v); err != nil {
			t.Fatal(err)
		}
	}
	if err := a.Flush(); err != nil {
		t.Fatal(err)
	}
	return a, s
}

// TestAlignSequences runs hand-built sequences of two channels (a = 0,
// b = 1) through an Aligner and checks the emitted frames and counters. Each
// expected frame is derived by hand in the comment beside the case from the
// rules in the Aligner doc: frame k = [k - 0.5, k + 0.5) s, its end E =
// k + 0.5; value = newest reading before E if E - t ≤ Staleness; frame k
// emitted once the newest event time ≥ E + Lateness; readings for emitted
// frames are late.
func TestAlignSequences(t *testing.T) {
	tests := []struct {
		name  string
		cfg   AlignConfig
		in    []reading
		want  []wantFrame
		stats AlignStats
		wm    float64 // watermark after Flush, seconds after t0
	}{
		{
			// Jitter of a few tens of ms either side of whole seconds, as a
			// source publishing on the grid gives: each reading lands in the
			// frame of its nominal second. Lateness 0.5 s, staleness 1 s.
			// b@1.02 (tmax ≥ 0.5 + 0.5) emits frame 0: a = 1, b = 10. b@2.05
			// emits frame 1: a = 2 (a@0.95), b = 11. a@3.01 emits frame 2:
			// a = 3 (a@1.97), b = 12. Flush: frame 3: 4, 13. (Frames starting
			// on the grid would put a@0.95 and a@1.97 in the frame before
			// their own, overwriting a@0.05, and leave frame 2 without an a.)
			name: "jitter either side of the grid",
			cfg:  AlignConfig{Period: time.Second, Lateness: 500 * time.Millisecond, Staleness: time.Second},
			in: []reading{{0, 0.05, 1}, {1, 0.10, 10}, {0, 0.95, 2}, {1, 1.02, 11},
				{0, 1.97, 3}, {1, 2.05, 12}, {0, 3.01, 4}, {1, 3.05, 13}},
			want: []wantFrame{{0, []float64{1, 10}, 0}, {1, []float64{2, 11}, 0},
				{2, []float64{3, 12}, 0}, {3, []float64{4, 13}, 0}},
			stats: AlignStats{Readings: 8, Frames: 4},
			wm:    3.5,
		},
		{
			// Staleness counts from the frame's end: staleness 1 s, lateness
			// 0.5 s. a@1.4 emits frame 0 (a = 1, b = 10); b@2.4 emits frame
			// 1: a = 2, b missing (1.5 - 0.4 = 1.1 > 1). Flush: frame 2: a
			// missing (2.5 - 1.4 = 1.1 > 1), b = 11.
			name:  "staleness from the frame's end",
			cfg:   AlignConfig{Period: time.Second, Lateness: 500 * time.Millisecond, Staleness: time.Second},
			in:    []reading{{0, -0.2, 1}, {1, 0.4, 10}, {0, 1.4, 2}, {1, 2.4, 11}},
			want:  []wantFrame{{0, []float64{1, 10}, 0}, {1, []float64{2, nan}, 0}, {2, []float64{nan, 11}, 0}},
			stats: AlignStats{Readings: 4, Frames: 3},
			wm:    2.5,
		},
		{
			// No lateness. a@1.0 emits frame 0 = [1, 10]. b@0.4 is then late.
			// b@1.0 twice: duplicate, last (12) wins. a@1.4 replaces a@1.0;
			// a@1.2 is older than a@1.4 in the same frame: out of order, ignored.
			name: "late, duplicate, out of order",
			cfg:  AlignConfig{Period: time.Second, Lateness: -1},
			in: []reading{{0, 0, 1}, {1, 0, 10}, {0, 1, 2}, {1, 0.4, 99}, {1, 1, 11},
				{1, 1, 12}, {0, 1.4, 3}, {0, 1.2, 9}},
			want:  []wantFrame{{0, []float64{1, 10}, 0}, {1, []float64{3, 12}, 0}},
			stats: AlignStats{Readings: 6, Late: 1, Duplicate: 1, OutOfOrder: 1, Frames: 2},
			wm:    1.5,
		},
		{
			// A 4 s silence, under the 10 s clock-jump limit, staleness 2 s.
			// a@4 emits frames 0..3: frame 1 (E = 1.5) still carries the t = 0
			// values (1.5 - 0 ≤ 2); frames 2 and 3 (E ≥ 2.5) are missing.
			// Flush: frame 4.
			name: "gap below the clock-jump limit",
			cfg:  AlignConfig{Period: time.Second, Lateness: -1, Staleness: 2 * time.Second, ClockJump: 10 * time.Second},
			in:   []reading{{0, 0, 1}, {1, 0, 10}, {0, 4, 2}, {1, 4, 11}},
			want: []wantFrame{{0, []float64{1, 10}, 0}, {1, []float64{1, 10}, 0},
				{2, []float64{nan, nan}, 0}, {3, []float64{nan, nan}, 0}, {4, []float64{2, 11}, 0}},
			stats: AlignStats{Readings: 4, Frames: 5},
			wm:    4.5,
		},
		{
			// A 99 s jump over the 10 s limit: frame 1 is flushed, the segment
			// ends and channel state is cleared; no frames 2..99. Frame 101: b
			// carries t = 100 (101.5 - 100 ≤ 2).
			name: "clock jump",
			cfg:  AlignConfig{Period: time.Second, Lateness: -1, Staleness: 2 * time.Second, ClockJump: 10 * time.Second},
			in:   []reading{{0, 0, 1}, {1, 0, 10}, {0, 1, 2}, {1, 1, 11}, {0, 100, 3}, {1, 100, 30}, {0, 101, 4}},
			want: []wantFrame{{0, []float64{1, 10}, 0}, {1, []float64{2, 11}, 0},
				{100, []float64{3, 30}, 1}, {101, []float64{4, 30}, 1}},
			stats: AlignStats{Readings: 7, Frames: 4, ClockJumps: 1},
			wm:    101.5,
		},
		{
			// Lateness 2 s: b@0.4 arrives after a@2.4 but frame 0 is pending
			// (emitted only when tmax ≥ 0.5 + 2), so it counts; a@3.2 emits
			// frame 0; b@1.4 goes to pending frame 1. Default staleness 3 s
			// keeps b = 11 through frame 3 (3.5 - 1.4 = 2.1 ≤ 3).
			name: "out of order within lateness",
			cfg:  AlignConfig{Period: time.Second, Lateness: 2 * time.Second},
			in:   []reading{{0, 0, 1}, {0, 1, 2}, {0, 2.4, 3}, {1, 0.4, 10}, {0, 3.2, 4}, {1, 1.4, 11}},
			want: []wantFrame{{0, []float64{1, 10}, 0}, {1, []float64{2, 11}, 0},
				{2, []float64{3, 11}, 0}, {3, []float64{4, 11}, 0}},
			stats: AlignStats{Readings: 6, Frames: 4},
			wm:    3.5,
		},
		{
			// Before any frame is emitted, an earlier reading (b@4.4 after
			// a@5.2) extends the segment backwards: frame 4 is emitted with a
			// missing (no reading yet), then frames 5 and 6 (b carried:
			// 6.5 - 4.4 = 2.1 ≤ 3).
			name:  "segment start extends backwards",
			cfg:   AlignConfig{Period: time.Second},
			in:    []reading{{0, 5.2, 1}, {1, 4.4, 10}, {0, 6.2, 2}},
			want:  []wantFrame{{4, []float64{nan, 10}, 0}, {5, []float64{1, 10}, 0}, {6, []float64{2, 10}, 0}},
			stats: AlignStats{Readings: 3, Frames: 3},
			wm:    6.5,
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			a, s := alignAll(t, tt.cfg, tt.in)
			if len(s.frames) != len(tt.want) {
				t.Fatalf("got %d frames %+v, want %d", len(s.frames), s.frames, len(tt.want))
			}
			for i, w := range tt.want {
				f := s.frames[i]
				if !f.Start.Equal(at(w.start)) || f.Segment != w.segment {
					t.Errorf("frame %d: start %v segment %d, want %v %d", i, f.Start, f.Segment, at(w.start), w.segment)
				}
				for c, v := range w.values {
					if !sameFloat(f.Values[c], v) || f.Missing[c] != math.IsNaN(v) {
						t.Errorf("frame %d channel %d: %v (missing %v), want %v", i, c, f.Values[c], f.Missing[c], v)
					}
				}
			}
			if got := a.Stats(); got != tt.stats {
				t.Errorf("stats %+v, want %+v", got, tt.stats)
			}
			if got := a.Watermark(); !got.Equal(at(tt.wm)) {
				t.Errorf("watermark %v, want %v", got, at(tt.wm))
			}
		})
	}
}

// TestAlignGrow: a channel added mid-stream is missing until it reports, and
// frames grow.
func TestAlignGrow(t *testing.T) {
	s := &sink{}
	a, err := NewAligner(AlignConfig{Period: time.Second, Lateness: -1}, 1, s.handle)
	if err != nil {
		t.Fatal(err)
	}
	a.Add(0, at(0), 1)
	a.Grow(2)
	a.Add(0, at(1), 2)
	a.Add(1, at(1), 20)
	a.Flush()
	if len(s.frames) != 2 || len(s.frames[0].Values) != 2 || !s.frames[0].Missing[1] || s.frames[1].Values[1] != 20 {
		t.Errorf("frames %+v", s.frames)
	}
}

// TestAlignConfig checks defaults (3 periods staleness, 1 period lateness,
// 100 periods clock jump) and rejected settings.
func TestAlignConfig(t *testing.T) {
	c, err := AlignConfig{Period: 2 * time.Second}.withDefaults()
	if err != nil || c.Staleness != 6*time.Second || c.Lateness != 2*time.Second || c.ClockJump != 200*time.Second {
		t.Errorf("defaults %+v %v", c, err)
	}
	for _, bad := range []AlignConfig{
		{}, {Period: -time.Second}, {Period: time.Second, Staleness: -1},
		{Period: time.Second, ClockJump: time.Millisecond}, {Period: 1 << 61},
	} {
		if _, err := NewAligner(bad, 1, nil); err == nil {
			t.Errorf("%+v accepted", bad)
		}
	}
	a, _ := NewAligner(AlignConfig{Period: time.Second}, 1, nil)
	if _, err := a.Advance(math.MaxInt64); err == nil {
		t.Error("time out of range accepted")
	}
}

// TestAlignNoAllocs: per-reading work allocates nothing once channels exist
// (STYLE: hot loops guarded by testing.AllocsPerRun).
func TestAlignNoAllocs(t *testing.T) {
	a, _ := NewAligner(AlignConfig{Period: time.Second}, 64, func(*Frame) error { return nil })
	ts := int64(1_700_000_000e9)
	allocs := testing.AllocsPerRun(1000, func() {
		ts += 250e6
		if ok, _ := a.Advance(ts); ok {
			for c := 0; c < 64; c++ {
				a.Put(c, float64(c))
			}
		}
	})
	if allocs != 0 {
		t.Errorf("%v allocs per line, want 0", allocs)
	}
}

// TestAlignJitterKeepsEveryReading: a source publishing once a period on
// the grid, each timestamp off by a uniform jitter below half a period (as
// a polled gateway stamps them), gets every reading into a frame of its
// own and in order: no frame repeats the reading before it, none is
// overwritten unseen. (Frames starting on the grid instead of centred on
// it would, for any jitter either side, repeat about a quarter of the
// readings and lose as many.) Seeded; 2000 readings per case.
func TestAlignJitterKeepsEveryReading(t *testing.T) {
	const n = 2000
	for _, tc := range []struct {
		name   string
		period time.Duration
		jitter time.Duration // uniform in [-jitter, +jitter]
	}{
		{"on the grid", 20 * time.Second, 0},
		{"demo plant: 20 s ± 0.3 s", 20 * time.Second, 300 * time.Millisecond},
		{"5 s ± 1 s", 5 * time.Second, time.Second},
		{"just under half a period", time.Second, 499 * time.Millisecond},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(1, 2))
			var got []float64
			carried := 0
			a, err := NewAligner(AlignConfig{Period: tc.period, Staleness: tc.period}, 1, func(f *Frame) error {
				if f.Missing[0] {
					t.Fatalf("frame %v missing", f.Start)
				}
				if len(got) > 0 && f.Values[0] == got[len(got)-1] {
					carried++
				}
				got = append(got, f.Values[0])
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			base := t0.UnixNano()
			for k := range n {
				ts := base + int64(k)*int64(tc.period)
				if tc.jitter > 0 {
					ts += rng.Int64N(2*int64(tc.jitter)+1) - int64(tc.jitter)
				}
				if _, err := a.Add(0, time.Unix(0, ts), float64(k)); err != nil {
					t.Fatal(err)
				}
			}
			if err := a.Flush(); err != nil {
				t.Fatal(err)
			}
			if carried > 0 || len(got) != n {
				t.Fatalf("%d frames for %d readings, %d repeating the reading before", len(got), n, carried)
			}
			for k, v := range got {
				if v != float64(k) {
					t.Fatalf("frame %d holds reading %v", k, v)
				}
			}
		})
	}
}
