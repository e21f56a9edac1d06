package alerts

import (
	"strings"
	"testing"
	"time"
)

// The screen's level-shift rule: the channel with the unit's largest
// level step is named when that step exceeds LevelShiftFactor times its
// normal level; a channel over its own level but smaller than another's
// step is the other's smear and is not named; a discrete channel (a
// status) is not judged, and its change of value is reported
// (StatusChanged). Design rule of this package, no outside reference.
func TestLevelShiftScreen(t *testing.T) {
	prof := []ChannelProfile{
		{Channel: "u.a.x", Frames: 100, LevelStepMax: 1},
		{Channel: "u.b.x", Frames: 100, LevelStepMax: 2},
		{Channel: "u.c.run", Frames: 100, Levels: 2},
		{Channel: "u.d.x", Frames: 100, Min: 3, Max: 5}, // no level: no rule
	}
	names := []string{"u.a.x", "u.b.x", "u.c.run", "u.d.x"}
	s := NewScreen("u", names, prof)
	shifted := func(x []float64, steps []float64, ok bool) string {
		t.Helper()
		s.Step(x, make([]bool, len(x)))
		s.SetLevelSteps(steps, ok, 0)
		var got []string
		for _, q := range s.AppendQuality(nil) {
			if q.Kind == QualityLevelShift {
				got = append(got, q.Channel)
			}
		}
		return strings.Join(got, ",")
	}
	for _, c := range []struct {
		name  string
		x     []float64
		steps []float64
		ok    bool
		want  string
	}{
		{"over its level, the largest", []float64{1, 2, 0, 4}, []float64{1.6, 0.5, 0, 0.1}, true, "u.a.x"},
		{"negative step", []float64{1.1, 2, 0, 4}, []float64{-1.6, 0.5, 0, 0.1}, true, "u.a.x"},
		{"at the factor: not over", []float64{1.2, 2, 0, 4}, []float64{1.5, 0.5, 0, 0.1}, true, ""},
		{"smeared by a larger step under its own level", []float64{1.3, 2, 0, 4}, []float64{1.6, 2.9, 0, 0.1}, true, ""},
		{"the larger over its level", []float64{1.4, 2.1, 0, 4}, []float64{1.6, 3.1, 0, 0.1}, true, "u.b.x"},
		{"a status step is not judged", []float64{1.5, 2.2, 1, 4}, []float64{0.2, 0.1, 50, 0.1}, true, ""},
		{"largest without a level", []float64{1.6, 2.3, 1, 4.1}, []float64{1.6, 0.1, 0, 9}, true, ""},
		{"no steps this frame", []float64{1.7, 2.4, 1, 4.2}, []float64{9, 0, 0, 0}, false, ""},
	} {
		if got := shifted(c.x, c.steps, c.ok); got != c.want {
			t.Errorf("%s: level shift on %q, want %q", c.name, got, c.want)
		}
	}
	s.Step([]float64{1, 2, 0, 4}, make([]bool, 4))
	if !s.StatusChanged() {
		t.Error("status 1 → 0 not reported")
	}
	s.Step([]float64{1.1, 2, 0, 4}, make([]bool, 4))
	if s.StatusChanged() {
		t.Error("status unchanged reported as changed")
	}
	// A missing reading of the shifted channel: no condition.
	s.Step([]float64{1.2, 2, 0, 4}, []bool{true, false, false, false})
	s.SetLevelSteps([]float64{5, 0, 0, 0}, true, 0)
	if q := s.AppendQuality(nil); len(q) != 0 {
		t.Errorf("conditions with the shifted channel missing: %v", q)
	}
	// Back to a reading: not judged until the two windows (span 3 frames)
	// hold none of the gap; a condition of another channel (out of range)
	// keeps every channel from being judged for as long.
	for f := 1; f <= 4; f++ {
		s.Step([]float64{1.2 + float64(f)/10, 2, 0, 4}, make([]bool, 4))
		s.SetLevelSteps([]float64{5, 0, 0, 0}, true, 3)
		got := len(s.AppendQuality(nil)) > 0
		if want := f > 3; got != want {
			t.Errorf("%d frames after the gap (span 3): level shift %v, want %v", f, got, want)
		}
	}
	for f := 0; f <= 4; f++ {
		d := 4.0
		if f == 0 {
			d = 1e6 // out of range
		}
		s.Step([]float64{1.7 + float64(f)/10, 2, 0, d}, make([]bool, 4))
		s.SetLevelSteps([]float64{5, 0, 0, 0}, true, 3)
		var got bool
		for _, q := range s.AppendQuality(nil) {
			got = got || q.Kind == QualityLevelShift
		}
		if want := f > 3; got != want {
			t.Errorf("%d frames after another channel's condition (span 3): level shift %v, want %v", f, got, want)
		}
	}
}

// A level-shift condition opens a data-quality alert of its own kind at
// once, the record valid under the schema, and closes after the 5 min
// off-delay (DefaultQuality).
func TestLevelShiftAlert(t *testing.T) {
	h := newHarness(t, Config{})
	h.quality(0, Quality{Channel: "u.a.x", Kind: QualityLevelShift})
	r := h.last()
	if r.Quality == nil || r.Quality.Kind != QualityLevelShift || r.Quality.Channel != "u.a.x" || r.End != nil {
		t.Fatalf("record at the first frame: %+v", r)
	}
	if !strings.Contains(r.ID, "level_shift:u.a.x") {
		t.Errorf("id %q does not name the kind and channel", r.ID)
	}
	h.quality(60)
	h.quality(299)
	if r := h.last(); r.End != nil {
		t.Fatalf("closed before the off-delay: %+v", r)
	}
	h.quality(361)
	if r := h.last(); r.End == nil {
		t.Fatalf("open after the off-delay: %+v", r)
	}
}

// A level shift's record carries its measure: the peak is the frame of the
// largest step over its threshold (not the first), with the step's size
// in the channel's unit (Quality.Level), valid under the schema; a
// snapshot taken while it is open restores both. Invented values.
func TestLevelShiftRecordSize(t *testing.T) {
	h := newHarness(t, Config{})
	q := func(v, before, after, step float64) Quality {
		return Quality{Channel: "u.a.x", Kind: QualityLevelShift, Value: v, Limit: 2,
			Before: before, After: after, Step: step, Window: 5 * time.Minute, Level: true}
	}
	h.quality(0, q(3, 6.80, 7.10, 0.25))
	h.quality(20, q(5, 6.80, 7.20, 0.38)) // the peak
	h.quality(40, q(4, 6.85, 7.20, 0.33))
	h2 := newHarness(t, Config{})
	h2.restore(h.snapshot())
	for _, hh := range []*harness{h, h2} {
		hh.quality(60)
		hh.quality(361) // the off-delay ends it: the final record
		r := hh.last()
		validateRecord(t, r)
		if r.End == nil {
			t.Fatalf("open after the off-delay: %+v", r)
		}
		if r.Peak.Statistic != QualityLevelShift || r.Peak.Value != 5 || r.Peak.Limit != 2 || r.Peak.Ratio != 2.5 ||
			!r.Peak.Time.Equal(sec(20)) {
			t.Errorf("peak %+v, want the step 5 over its threshold 2 at 20 s", r.Peak)
		}
		if lv := r.Quality.Level; lv == nil || lv.Before != 6.80 || lv.After != 7.20 || lv.Step != 0.38 || time.Duration(lv.Window) != 5*time.Minute {
			t.Errorf("level %+v, want 6.80 → 7.20, 0.38 unexplained, 5m0s windows", lv)
		}
	}
}
