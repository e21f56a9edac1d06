package alerts

import (
	"bytes"
	"fmt"
	"math"
	"testing"
	"time"
)

// Frame times the engine must take: the whole range the stream package
// accepts (±2⁶² ns around the Unix epoch, about 1823 to 2116), before 1970
// included. Kept here rather than imported so that alerts depends on no
// other package of ours.
const maxAbsFrameNs = 1 << 62

// TestFloorDivMod checks the helpers against the definition
// ⌊x/y⌋ and x − y⌊x/y⌋ ∈ [0, y) (hand derivation).
func TestFloorDivMod(t *testing.T) {
	for _, c := range []struct{ x, y, div, mod int64 }{
		{0, 60, 0, 0}, {59, 60, 0, 59}, {60, 60, 1, 0},
		{-1, 60, -1, 59}, {-60, 60, -1, 0}, {-61, 60, -2, 59},
		{-1, 1440, -1, 1439}, {-1440, 1440, -1, 0}, {-1441, 1440, -2, 1439},
		{math.MinInt64 + 1, 1440, -6405119470038039, 353}, // -(2⁶³-1) = -1440·6405119470038038 - 1087 [hand]
	} {
		if d, m := floorDiv(c.x, c.y), floorMod(c.x, c.y); d != c.div || m != c.mod {
			t.Errorf("floor(%d / %d) = %d, mod %d; want %d, %d", c.x, c.y, d, m, c.div, c.mod)
		}
	}
}

// TestRatesBeforeEpoch: a log dated before 1970 (and one crossing
// 1970-01-01 00:00 UTC, where Unix minutes change sign) opens alerts and
// counts them in the trailing hour and day like any other, instead of
// indexing the per-minute ring with a negative number. Expected counts by
// hand: alerts at −61 s, −1 s, +0 s and +59 s fall in minutes −2, −1, 0 and
// 0 (each base is on a minute); the hour is the current minute and the 59
// before it.
func TestRatesBeforeEpoch(t *testing.T) {
	for _, base := range []time.Time{
		time.Unix(0, 0).UTC(),
		time.Date(1969, 7, 20, 20, 17, 0, 0, time.UTC),
		time.Date(1824, 1, 1, 0, 0, 0, 0, time.UTC), // near the start of the accepted range (1823-11)
	} {
		t.Run(base.Format("2006-01-02T15:04:05"), func(t *testing.T) {
			h := newHarness(t, Config{})
			at := func(s float64, q ...Quality) {
				t.Helper()
				o := Observation{Unit: "u", Time: base.Add(time.Duration(s * float64(time.Second))), ModelState: ModelAdapting, Quality: q}
				if err := h.e.Observe(&o); err != nil {
					t.Fatalf("observe at %v: %v", o.Time, err)
				}
			}
			for i, s := range []float64{-61, -1, 0, 59} {
				at(s, Quality{Channel: fmt.Sprintf("u.c%d.x", i), Kind: QualityStuck})
			}
			c := h.e.Counters(nil)[0]
			if c.Opened != 4 || c.LastHour != 4 || c.LastDay != 4 {
				t.Fatalf("after four alerts: opened %d hour %d day %d, want 4 4 4", c.Opened, c.LastHour, c.LastDay)
			}
			// At +58 min the hour holds minutes −1 … 58: the alert of minute
			// −2 has left it.
			at(58 * 60)
			if c = h.e.Counters(nil)[0]; c.LastHour != 3 || c.LastDay != 4 {
				t.Errorf("at +58 min: hour %d day %d, want 3 4", c.LastHour, c.LastDay)
			}
			// At +1438 min the day holds minutes −1 … 1438.
			at(1438 * 60)
			if c = h.e.Counters(nil)[0]; c.LastHour != 0 || c.LastDay != 3 {
				t.Errorf("at +1438 min: hour %d day %d, want 0 3", c.LastHour, c.LastDay)
			}
			at(1440 * 60)
			if c = h.e.Counters(nil)[0]; c.LastDay != 0 {
				t.Errorf("at +1440 min: day %d, want 0", c.LastDay)
			}
			// The ring survives a snapshot taken at a negative minute.
			var buf bytes.Buffer
			h2 := newHarness(t, Config{})
			o := Observation{Unit: "u", Time: base.Add(-90 * time.Second), ModelState: ModelAdapting, Quality: []Quality{{Channel: "u.a.x", Kind: QualityStuck}}}
			if err := h2.e.Observe(&o); err != nil {
				t.Fatal(err)
			}
			if err := h2.e.Snapshot(&buf); err != nil {
				t.Fatal(err)
			}
			h3 := newHarness(t, Config{})
			if err := h3.e.Restore(&buf); err != nil {
				t.Fatal(err)
			}
			if c := h3.e.Counters(nil)[0]; c.LastHour != 1 || c.LastDay != 1 {
				t.Errorf("restored at a negative minute: hour %d day %d, want 1 1", c.LastHour, c.LastDay)
			}
		})
	}
}

// FuzzEngineTimes drives one unit through alarms, quality alerts, a flood
// and a snapshot round trip at frame times anywhere in the accepted range
// (before 1970 included) and checks that nothing panics, every observation
// after the first is accepted, and the trailing counts never exceed the
// alerts opened. The seeds (run by plain go test) sit at the ends of the
// range, around the epoch and at minute and day boundaries on both sides.
func FuzzEngineTimes(f *testing.F) {
	for _, ns := range []int64{
		0, -1, 1, -60e9, -60e9 - 1, -86400e9, -86400e9 + 1,
		time.Date(1969, 12, 31, 23, 59, 30, 0, time.UTC).UnixNano(),
		time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC).UnixNano(),
		time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC).UnixNano(),
		-maxAbsFrameNs, maxAbsFrameNs - 3600e9, math.MinInt64, math.MaxInt64,
	} {
		f.Add(ns, int64(time.Second), uint8(3))
		f.Add(ns, int64(37*time.Second), uint8(200))
	}
	f.Fuzz(func(t *testing.T, ns, stepNs int64, pattern uint8) {
		// Map into the range with room for the frames after the start.
		const frames = 64
		step := time.Duration(1 + uint64(stepNs)%uint64(10*time.Minute))
		span := int64(frames) * int64(step)
		lo, hi := int64(-maxAbsFrameNs), int64(maxAbsFrameNs)-span
		if ns < lo || ns > hi {
			ns = lo + int64(uint64(ns)%uint64(hi-lo))
		}
		start := time.Unix(0, ns).UTC()
		h := newHarness(t, Config{Rules: Rules{OnCount: 2, OnWindow: 3, OffDelay: 2 * step}})
		for i := range frames {
			o := Observation{
				Unit: "u", Time: start.Add(time.Duration(i) * step), ModelState: ModelAdapting,
				Stats: []Stat{{StatT2, 1, 10}, {StatSPE, 1, 5}, {StatPhi, 1, 3}},
			}
			if pattern>>(i%8)&1 == 1 {
				o.Stats[0].Value = 20
				o.Quality = []Quality{{Channel: fmt.Sprintf("u.c%d.x", i%13), Kind: QualityStuck}}
			}
			if err := h.e.Observe(&o); err != nil {
				t.Fatalf("frame %d at %v: %v", i, o.Time, err)
			}
			if i == frames/2 {
				var buf bytes.Buffer
				if err := h.e.Snapshot(&buf); err != nil {
					t.Fatal(err)
				}
				if err := h.e.Restore(&buf); err != nil {
					t.Fatalf("restore at %v: %v", o.Time, err)
				}
			}
		}
		h.e.Tick("u", start.Add(time.Duration(frames)*step))
		c := h.e.Counters(nil)[0]
		if c.LastHour < 0 || c.LastHour > c.LastDay || uint64(c.LastDay) > c.Opened {
			t.Fatalf("hour %d day %d opened %d", c.LastHour, c.LastDay, c.Opened)
		}
	})
}
