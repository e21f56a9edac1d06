package alerts

import (
	"strings"
	"testing"
)

// resFrame feeds unit "u" at second at: T², SPE, φ and res at the given
// multiples of their limits (res absent when res < 0); the leading channel
// explains share of the index, five others the rest in equal parts, all
// over their own limits. taking marks the model as taking in a new normal.
func (h *harness) resFrame(at, t2, spe, phi, res, share float64, taking bool) {
	h.t.Helper()
	o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting, TakingIn: taking,
		Stats: []Stat{{StatT2, 10 * t2, 10}, {StatSPE, 5 * spe, 5}, {StatPhi, phi, 1}}}
	if res >= 0 {
		o.Stats = append(o.Stats, Stat{StatResidual, 8 * res, 8})
	}
	h.observeSpread(&o, []string{"u.sub01.flow", "u.sub02.flow", "u.sub03.flow", "u.sub04.flow", "u.sub05.flow", "u.sub06.flow"},
		share, (1-share)/5)
}

// resFrames feeds resFrame at seconds 10k for k in [from, to).
func (h *harness) resFrames(from, to, t2, spe, phi, res, share float64, taking bool) {
	h.t.Helper()
	for k := from; k < to; k++ {
		h.resFrame(10*k, t2, spe, phi, res, share, taking)
	}
}

// TestPointByResidual: the reading of newpointres.go (on unless
// Rules.NoPointByResidual) on hand-made frames at 10 s. The cases follow
// its contract: SPE over its limit (1.5 times) with T² inside (0.5) and
// res inside (0.5), spread over the channels (first share 0.2), is a move
// along learned relations: one notice naming SPE and a Move, no incident.
// With the reading off, with res over its limit, with no res scored, or
// with one channel explaining the excess (share 0.8; off the mode plane
// already at Rules.SpecificShare, 0.3 here) it is an incident, as before.
// φ over its limit alone is a move too. After the point is taken in, res
// going over its limit escalates it; SPE still over its limit an hour
// after the record does too.
func TestPointByResidual(t *testing.T) {
	on := Config{}
	cases := []struct {
		name              string
		cfg               Config
		t2, spe, phi, res float64
		share             float64
		notices, incs     int
	}{
		{"spe move", on, 0.5, 1.5, 1.2, 0.5, 0.2, 1, 0},
		{"phi alone", on, 0.9, 0.9, 1.3, 0.5, 0.2, 1, 0},
		{"reading off", Config{Rules: Rules{NoPointByResidual: true}}, 0.5, 1.5, 1.2, 0.5, 0.2, 0, 1},
		{"res over", on, 0.5, 1.5, 1.2, 1.5, 0.2, 0, 1},
		{"no res scored", on, 0.5, 1.5, 1.2, -1, 0.2, 0, 1},
		{"one channel", on, 0.5, 1.5, 1.2, 0.5, 0.8, 0, 1},
		// Off the mode plane a channel explaining SpecificShare (0.25) of
		// the index names a place: no move. Along the modes (T² over its
		// limit) the same share is a move, as with the reading off.
		{"names a place off the plane", on, 0.5, 1.5, 1.2, 0.5, 0.3, 0, 1},
		{"same share along the modes", on, 1.5, 1.5, 1.2, 0.5, 0.3, 1, 0},
		{"rule off", Config{Rules: Rules{NoNewPoint: true}}, 0.5, 1.5, 1.2, 0.5, 0.2, 0, 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h, pl := pointHarness(t, c.cfg)
			h.resFrames(0, 5, 0.5, 0.5, 0.5, 0.5, 0.2, false)
			h.resFrames(5, 10, c.t2, c.spe, c.phi, c.res, c.share, false)
			if n, i := h.kinds(); n != c.notices || i != c.incs || len(pl.moves) != c.notices {
				t.Fatalf("%d notices, %d incidents, %d moves; want %d, %d, %d", n, i, len(pl.moves), c.notices, c.incs, c.notices)
			}
		})
	}
	t.Run("record", func(t *testing.T) {
		h, _ := pointHarness(t, on)
		h.resFrames(0, 10, 0.5, 1.5, 1.2, 0.5, 0.2, false)
		for _, r := range h.recs {
			if r.Kind != KindNotice {
				continue
			}
			if r.Peak.Statistic != StatSPE || !strings.Contains(r.Notice, "SPE 1.50 times its limit") ||
				!strings.Contains(r.Notice, "res within its limit") {
				t.Errorf("notice peak %q, text %q: want SPE at 1.50 times its limit, res within its own", r.Peak.Statistic, r.Notice)
			}
			return
		}
		t.Fatal("no notice")
	})
	t.Run("escalates on res", func(t *testing.T) {
		h, _ := pointHarness(t, on)
		h.resFrames(0, 10, 0.5, 1.5, 1.2, 0.5, 0.2, false)
		h.resFrames(10, 40, 2, 3, 3, 2, 0.6, true) // taken in: not judged
		h.resFrames(40, 50, 0.5, 0.5, 0.5, 0.5, 0.2, false)
		if n, i := h.kinds(); n != 1 || i != 0 {
			t.Fatalf("after the point was taken in: %d notices, %d incidents; want 1, 0", n, i)
		}
		h2, _ := pointHarness(t, on)
		h2.resFrames(0, 10, 0.5, 1.5, 1.2, 0.5, 0.2, false)
		h2.resFrames(10, 40, 0.5, 1.5, 1.2, 0.5, 0.2, true)
		h2.resFrames(40, 60, 0.5, 1.5, 1.2, 1.6, 0.2, false) // res goes over its limit
		n, i := h2.kinds()
		if n != 1 || i != 1 {
			t.Fatalf("res joining after the point was taken in: %d notices, %d incidents; want 1, 1", n, i)
		}
		for _, r := range h2.recs {
			if r.Kind == KindIncident && r.Start.Before(sec(400)) {
				t.Errorf("incident %s starts at %v, before res went over its limit (400 s)", r.ID, r.Start)
			}
		}
	})
	// Once a move off the plane is noted, frames on which one channel comes
	// to explain SpecificShare of the index for the on-delay escalate it.
	t.Run("escalates on a named place", func(t *testing.T) {
		h, _ := pointHarness(t, on)
		h.resFrames(0, 10, 0.5, 1.5, 1.2, 0.5, 0.2, false)
		h.resFrames(10, 40, 0.5, 1.5, 1.2, 0.5, 0.2, true)
		h.resFrames(40, 60, 0.5, 1.5, 1.2, 0.5, 0.3, false)
		if n, i := h.kinds(); n != 1 || i != 1 {
			t.Fatalf("a place named after the move was noted: %d notices, %d incidents; want 1, 1", n, i)
		}
	})
	// An off-plane frame that names a place, before any point, is no move,
	// but it does not hold up the rule for a T² move that follows.
	t.Run("named place does not hold up a later move", func(t *testing.T) {
		h, pl := pointHarness(t, on)
		h.resFrames(0, 5, 0.5, 0.5, 0.5, 0.5, 0.2, false)
		h.resFrame(50, 0.5, 1.5, 1.2, 0.5, 0.3, false) // one frame: no alarm
		h.resFrames(6, 15, 1.5, 0.5, 1.2, 0.5, 0.2, false)
		if n, i := h.kinds(); n != 1 || i != 0 || len(pl.moves) != 1 {
			t.Fatalf("T² move after an off-plane frame naming a place: %d notices, %d incidents, %d moves; want 1, 0, 1", n, i, len(pl.moves))
		}
	})
	t.Run("settle", func(t *testing.T) {
		h, _ := pointHarness(t, on)
		for k := 0.0; k < 500; k++ {
			h.resFrame(10*k, 0.5, 1.5, 1.2, 0.5, 0.2, k >= 10 && k < 40)
		}
		if n, i := h.kinds(); n != 1 || i != 1 {
			t.Fatalf("SPE still over its limit past %v: %d notices, %d incidents; want 1, 1", PointSettle, n, i)
		}
	})
}
