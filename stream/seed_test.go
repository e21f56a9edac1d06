package stream

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"testing"
	"time"
)

// TestAlignSeed checks that an aligner seeded from the last frame before a
// cut (its present Values and Times) emits the frames after the cut exactly
// as an uninterrupted aligner fed the whole sequence. Both runs follow the
// rules in the Aligner doc, so the uninterrupted run is the reference; the
// comments derive the staleness edges by hand (frame k covers
// [k - 0.5, k + 0.5) s). Period 1 s, lateness 0.5 s.
func TestAlignSeed(t *testing.T) {
	tests := []struct {
		name string
		cfg  AlignConfig
		in   []reading
		cut  int     // readings taken before the restart
		last float64 // time (s after t0) of the last frame emitted before the cut
		redo int     // readings before the cut delivered again after it (not in an emitted frame)
		// first: a frame after the cut whose values (NaN: missing) are
		// derived by hand in the comment.
		first    float64
		values   []float64
		wantSeed int // channels present in the last frame (seeded)
	}{
		{
			// Staleness 1 s. a@1.47 emits frame 0 (a = 1, b = 10) and is
			// still pending at the cut, so it comes again. Frame 1: a = 3,
			// b@0.45 is 1.5 - 0.45 = 1.05 s > 1 s old: missing.
			name: "stale just over the limit",
			cfg:  AlignConfig{Period: time.Second, Lateness: 500 * time.Millisecond, Staleness: time.Second},
			in:   []reading{{0, -0.40, 1}, {1, 0.45, 10}, {0, 1.47, 3}, {1, 2.00, 11}, {0, 3.7, 5}},
			cut:  3, last: 0, redo: 1, first: 1, values: []float64{3, nan}, wantSeed: 2,
		},
		{
			// Staleness 1.05 s: b@0.45 is exactly 1.05 s old at the end of
			// frame 1 (E - t = Staleness is still valid): b = 10 carried
			// across the restart only by the seed.
			name: "stale exactly at the limit",
			cfg:  AlignConfig{Period: time.Second, Lateness: 500 * time.Millisecond, Staleness: 1050 * time.Millisecond},
			in:   []reading{{0, -0.40, 1}, {1, 0.45, 10}, {0, 1.47, 3}, {1, 2.00, 11}, {0, 3.7, 5}},
			cut:  3, last: 0, redo: 1, first: 1, values: []float64{3, 10}, wantSeed: 2,
		},
		{
			// Default staleness 3 s; b reads only at -0.2 (a dropout after).
			// a@1.6 emits frame 0; a@0.6 and a@1.6 are pending and come
			// again. Frame 2: a = 3, b = 7 (2.5 + 0.2 = 2.7 ≤ 3); frame 3
			// has b missing (3.5 + 0.2 = 3.7 > 3) in both runs.
			name: "dropout carried for several frames",
			cfg:  AlignConfig{Period: time.Second, Lateness: 500 * time.Millisecond},
			in: []reading{{0, -0.4, 1}, {1, -0.2, 7}, {0, 0.6, 2}, {0, 1.6, 3}, {0, 2.6, 4},
				{0, 3.6, 5}, {0, 4.6, 6}},
			cut: 4, last: 0, redo: 2, first: 2, values: []float64{3, 7}, wantSeed: 2,
		},
		{
			// a@2.6 emits frame 1 (a@0.6, b@-0.2 seeded). Redelivery goes
			// back to b@-0.2, so the restarted aligner emits frames 0 and 1
			// again (a restored unit skips them; a seed newer than a frame's
			// end is not used in it) and matches from frame 2 on: a = 3,
			// b = 7.
			name: "redelivery from before the last frame",
			cfg:  AlignConfig{Period: time.Second, Lateness: 500 * time.Millisecond},
			in: []reading{{0, -0.4, 1}, {1, -0.2, 7}, {0, 0.6, 2}, {0, 1.6, 3}, {0, 2.6, 4},
				{0, 3.6, 5}, {0, 4.6, 6}},
			cut: 5, last: 1, redo: 4, first: 2, values: []float64{3, 7}, wantSeed: 2,
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, whole := alignAll(t, tc.cfg, tc.in)

			// Before the cut: keep the last frame's values and times.
			var lastV []float64
			var lastT []int64
			var lastM []bool
			var lastStart time.Time
			b, _ := NewAligner(tc.cfg, 2, func(f *Frame) error {
				lastV, lastT, lastM = slices.Clone(f.Values), slices.Clone(f.Times), slices.Clone(f.Missing)
				lastStart = f.Start
				return nil
			})
			for _, r := range tc.in[:tc.cut] {
				b.Add(r.c, at(r.t), r.v)
			}
			if !lastStart.Equal(at(tc.last)) {
				t.Fatalf("last frame before the cut starts at %v, want %v", lastStart, at(tc.last))
			}
			after := &sink{}
			c, _ := NewAligner(tc.cfg, 2, after.handle)
			seeded := 0
			for ch := range lastV {
				if !lastM[ch] {
					if err := c.Seed(ch, lastV[ch], time.Unix(0, lastT[ch])); err != nil {
						t.Fatal(err)
					}
					seeded++
				}
			}
			if seeded != tc.wantSeed {
				t.Errorf("seeded %d channels, want %d", seeded, tc.wantSeed)
			}
			for _, r := range tc.in[tc.cut-tc.redo:] {
				if _, err := c.Add(r.c, at(r.t), r.v); err != nil {
					t.Fatal(err)
				}
			}
			c.Flush()
			if err := c.Seed(0, 1, at(0)); !errors.Is(err, ErrSeedLate) {
				t.Errorf("seed after readings: %v, want ErrSeedLate", err)
			}

			byStart := map[time.Time]frameCopy{}
			for _, f := range after.frames {
				byStart[f.Start] = f
			}
			n := 0
			for _, w := range whole.frames {
				if !w.Start.After(lastStart) {
					continue
				}
				g, ok := byStart[w.Start]
				if !ok {
					t.Errorf("frame %v not emitted after the restart", w.Start)
					continue
				}
				n++
				for ch := range w.Values {
					if w.Missing[ch] != g.Missing[ch] || (!w.Missing[ch] && w.Values[ch] != g.Values[ch]) {
						t.Errorf("frame %v channel %d: restarted %v (missing %v), uninterrupted %v (missing %v)",
							w.Start, ch, g.Values[ch], g.Missing[ch], w.Values[ch], w.Missing[ch])
					}
				}
				if w.Start.Equal(at(tc.first)) {
					for ch, want := range tc.values {
						got := w.Values[ch]
						if math.IsNaN(want) != w.Missing[ch] || (!w.Missing[ch] && got != want) {
							t.Errorf("frame %v channel %d: %v (missing %v), want %v by hand", w.Start, ch, got, w.Missing[ch], want)
						}
					}
				}
			}
			if n == 0 {
				t.Error("no frame after the cut compared")
			}
		})
	}
}

// TestIntakeSeedDiscovered: with auto-discovery a seeded channel is not in
// the registry at the restart; its seed waits and is applied when the
// channel is discovered, before its first reading. By hand (period 1 s,
// default staleness 3 s, lateness 1 s): b is seeded at 0.5 with 7 and
// first read at 2.2, so frame 1 holds a = 2 and b = 7 (2 - 0.5 = 1.5 ≤ 3),
// frame 2 a = 2 carried and b = 8.
func TestIntakeSeedDiscovered(t *testing.T) {
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	if err := in.SeedLast("m.b", 7, at(0.5)); err != nil {
		t.Fatal(err)
	}
	lines := fmt.Sprintf("m a=2 %d\nm b=8 %d\n", at(1.1).UnixNano(), at(2.2).UnixNano())
	if _, err := in.Feed("test", []byte(lines)); err != nil {
		t.Fatal(err)
	}
	if err := in.Flush(); err != nil {
		t.Fatal(err)
	}
	if c, ok := in.Channels().Index("m.b"); !ok || c != 1 {
		t.Fatalf("channel m.b: %d, %v", c, ok)
	}
	want := [][]float64{{2, 7}, {2, 8}}
	if len(s.frames) != len(want) {
		t.Fatalf("%d frames, want %d", len(s.frames), len(want))
	}
	for i, f := range s.frames {
		if !f.Start.Equal(at(float64(i + 1))) {
			t.Errorf("frame %d starts at %v", i, f.Start)
		}
		for c, w := range want[i] {
			if f.Missing[c] || f.Values[c] != w {
				t.Errorf("frame %d channel %d: %v (missing %v), want %v", i, c, f.Values[c], f.Missing[c], w)
			}
		}
	}
}
