package alerts

import (
	"math"
	"slices"
	"testing"
	"time"
)

// TestScreen: the rules of the learned data-quality profile, frame by
// frame (design figures StuckMargin, rest values, discreteness, normal
// range and longest gap; no published reference).
func TestScreen(t *testing.T) {
	prof := []ChannelProfile{
		{Channel: "u.speed", Frames: 1000, MaxFlat: 2, Rest: []float64{0}, Min: 0, Max: 1510},
		{Channel: "u.status", Frames: 1000, MaxFlat: 500, Levels: 2, Min: 0, Max: 1},
		{Channel: "u.flow", Frames: 1000, MaxFlat: 3, Min: 35, Max: 45, MaxGap: 4},
	}
	names := []string{"u.speed", "u.status", "u.flow", "u.new"}
	nan := math.NaN()
	// run feeds frames of x; channels flagged in live change by 0.001 a
	// frame (a live reading).
	run := func(t *testing.T, frames int, x [4]float64, live [4]bool) (*Screen, []Quality) {
		s := NewScreen("u", names, prof)
		var q []Quality
		miss := make([]bool, 4)
		for k := 0; k < frames; k++ {
			y := x
			for i := range miss {
				miss[i] = x[i] != x[i]
				if live[i] {
					y[i] += 0.001 * float64(k)
				}
			}
			s.Step(y[:], miss)
			q = s.AppendQuality(q[:0])
		}
		return s, q
	}
	cases := []struct {
		name   string
		frames int
		x      [4]float64
		live   [4]bool
		want   []Quality
	}{
		{"machine at rest and status held for long", 5000, [4]float64{0, 0, 40, 1}, [4]bool{false, false, true, true}, nil},
		{"flow frozen just within margin", 3 + StuckMargin, [4]float64{1500, 1, 40, 1}, [4]bool{true, false, false, true}, nil},
		{"flow frozen past margin", 4 + StuckMargin, [4]float64{1500, 1, 40, 1}, [4]bool{true, false, false, true},
			[]Quality{{Channel: "u.flow", Kind: QualityStuck}}},
		{"speed frozen at a live value", 3 + StuckMargin, [4]float64{1500, 1, 40, 1}, [4]bool{false, false, true, true},
			[]Quality{{Channel: "u.speed", Kind: QualityStuck}}},
		{"flow far out of range", 1, [4]float64{1500, 1, 60, 1}, [4]bool{}, []Quality{{Channel: "u.flow", Kind: QualityOutOfRange}}},
		{"flow near its range", 1, [4]float64{1500, 1, 54, 1}, [4]bool{}, nil},
		{"status at a value never seen", 1, [4]float64{1500, 7, 40, 1}, [4]bool{}, nil},
		{"all silent", 3, [4]float64{nan, nan, nan, nan}, [4]bool{}, []Quality{{Channel: "u", Kind: QualitySilent}}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, q := run(t, c.frames, c.x, c.live)
			if !slices.Equal(q, c.want) {
				t.Errorf("got %v, want %v", q, c.want)
			}
		})
	}
	t.Run("missing past the longest normal gap", func(t *testing.T) {
		s, _ := run(t, 4, [4]float64{1500, 1, nan, 1}, [4]bool{true, false, false, true})
		if s.MissingAlarm(2) || !s.MissingAlarm(3) {
			t.Errorf("4 missing frames: flow (max gap 4) alarm %v, unprofiled channel alarm %v; want false, true", s.MissingAlarm(2), s.MissingAlarm(3))
		}
		s.Step([]float64{1500, 1, nan, 1}, []bool{false, false, true, false})
		if !s.MissingAlarm(2) {
			t.Error("5 missing frames: flow (max gap 4) raises no missing condition")
		}
	})
	t.Run("no allocation per frame", func(t *testing.T) {
		s := NewScreen("u", names, prof)
		x, miss := []float64{1500, 1, 40, 1}, make([]bool, 4)
		q := make([]Quality, 0, 8)
		if n := testing.AllocsPerRun(100, func() { s.Step(x, miss); q = s.AppendQuality(q[:0]) }); n != 0 {
			t.Errorf("%v allocations per frame", n)
		}
	})
}

// TestNotice: a notice is one closed record that validates against the
// schema and opens no alert.
func TestNotice(t *testing.T) {
	h := newHarness(t, Config{})
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	h.e.Observe(&Observation{Unit: "u", Time: t0, ModelState: ModelBaseline})
	if !h.e.Notice("u", GroupState, "3", "new operating state 3", t0.Add(time.Second)) {
		t.Fatal("notice not published")
	}
	if len(h.recs) != 1 || h.recs[0].Kind != KindNotice || h.recs[0].End == nil || h.recs[0].Notice == "" {
		t.Fatalf("records %+v", h.recs)
	}
	if open := h.e.Open(nil); len(open) != 0 {
		t.Errorf("a notice left %d open alerts", len(open))
	}
}

// TestSilence: the wall-clock silent condition opens one silent alert at
// once (its record validates against the schema), repeated calls keep it,
// and the unit's next frame that does not name it closes it.
func TestSilence(t *testing.T) {
	h := newHarness(t, Config{})
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	h.e.Observe(&Observation{Unit: "u", Time: t0, ModelState: ModelAdapting})
	if h.e.Silence("u", t0) || h.e.Silence("nobody", t0.Add(time.Minute)) {
		t.Fatal("Silence stepped at the last frame's time or for an unknown unit")
	}
	for k := 1; k <= 3; k++ {
		if !h.e.Silence("u", t0.Add(time.Duration(k)*10*time.Second)) {
			t.Fatalf("Silence %d not stepped", k)
		}
	}
	open := h.e.Open(nil)
	if len(open) != 1 || open[0].Quality == nil || open[0].Quality.Kind != QualitySilent || open[0].Quality.Channel != "u" {
		t.Fatalf("open alerts %+v, want one silent alert of unit u", open)
	}
	h.e.Observe(&Observation{Unit: "u", Time: t0.Add(time.Minute), ModelState: ModelAdapting})
	if open := h.e.Open(nil); len(open) != 0 {
		t.Errorf("silent alert still open after a frame with readings: %+v", open)
	}
	last := h.recs[len(h.recs)-1]
	if last.End == nil || !last.End.Equal(t0.Add(time.Minute)) {
		t.Errorf("silent alert ended %v, want at the returning frame", last.End)
	}
}

// TestSilenceUnseen: a unit without frames in this run (known from the
// configuration or a model file) raises one silent alert however often it
// is told, and its first frame closes it, at the alert's start when the
// frame is stamped before it (the service's estimate of the plant's clock
// may run ahead of the gateway's).
func TestSilenceUnseen(t *testing.T) {
	h := newHarness(t, Config{})
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	for k := 0; k < 3; k++ {
		if !h.e.SilenceUnseen("u", t0.Add(time.Duration(k)*time.Second)) {
			t.Fatalf("SilenceUnseen %d not stepped", k)
		}
	}
	if h.e.SilenceUnseen("u", t0) {
		t.Error("SilenceUnseen stepped at a time already passed")
	}
	open := h.e.Open(nil)
	if len(open) != 1 || open[0].Quality == nil || open[0].Quality.Kind != QualitySilent || open[0].Quality.Channel != "u" {
		t.Fatalf("open alerts %+v, want one silent alert of unit u", open)
	}
	if err := h.e.Observe(&Observation{Unit: "u", Time: t0.Add(-500 * time.Millisecond), ModelState: ModelAdapting}); err != nil {
		t.Fatalf("first frame refused: %v", err)
	}
	if open := h.e.Open(nil); len(open) != 0 {
		t.Errorf("silent alert still open after the unit's first frame: %+v", open)
	}
	last := h.recs[len(h.recs)-1]
	if last.End == nil || !last.End.Equal(t0) {
		t.Errorf("silent alert ended %v, want at its start %v", last.End, t0)
	}
}
