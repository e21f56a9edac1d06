package alerts

import (
	"sync"
	"testing"
	"time"
)

// pointLog is a masking Learning that also takes in new normals,
// recording each Move and Accept.
type pointLog struct {
	maskLog
	mu      sync.Mutex
	moves   []string
	accepts int
}

func (p *pointLog) Move(unit string) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.moves = append(p.moves, unit)
}

func (p *pointLog) Accept(unit string, ch []string) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.accepts++
}

// pointHarness is a harness whose engine masks, accepts and moves.
func pointHarness(t *testing.T, cfg Config) (*harness, *pointLog) {
	t.Helper()
	pl := &pointLog{}
	return learnHarness(t, cfg, pl), pl
}

// pointFrame feeds unit "u" at second at: T² at t2 times its limit, SPE at
// spe times its limit, φ between them, res inside; the leading channel
// explains share of the index (the next two less), over its own limit.
// taking marks the model as taking in a new normal.
func (h *harness) pointFrame(at, t2, spe, share float64, taking bool) {
	h.t.Helper()
	phi := (t2 + spe) / 2
	o := Observation{Unit: "u", Time: sec(at), ModelState: ModelAdapting, TakingIn: taking,
		Stats: []Stat{{StatT2, 10 * t2, 10}, {StatSPE, 5 * spe, 5}, {StatPhi, phi, 1}, {StatResidual, 1, 8}}}
	h.observeSpread(&o, []string{"u.header.pressure", "u.pump1.dp", "u.pump2.dp"}, share, (1-share)/3)
}

// observeSpread gives o one contributor per channel, all over their own
// limits: the first explains share of the index, each other rest; then
// feeds o.
func (h *harness) observeSpread(o *Observation, channels []string, share, rest float64) {
	h.t.Helper()
	for i, c := range channels {
		s := rest
		if i == 0 {
			s = share
		}
		o.Contributors = append(o.Contributors, Contributor{Channel: c, RBC: 4 * s, Limit: 0.3, Share: s})
	}
	if err := h.e.Observe(o); err != nil {
		h.t.Fatalf("observe at %v: %v", o.Time, err)
	}
}

// pointFrames feeds pointFrame at seconds 10k for k in [from, to).
func (h *harness) pointFrames(from, to, t2, spe, share float64, taking bool) {
	h.t.Helper()
	for k := from; k < to; k++ {
		h.pointFrame(10*k, t2, spe, share, taking)
	}
}

// kinds counts the records of h by kind and group (first revisions).
func (h *harness) kinds() (notices, incidents int) {
	seen := map[string]bool{}
	for _, r := range h.recs {
		if seen[r.ID] {
			continue
		}
		seen[r.ID] = true
		switch {
		case r.Kind == KindNotice && r.Group == GroupPoint:
			notices++
		case r.Kind == KindIncident && r.Group == GroupModel:
			incidents++
		}
	}
	return notices, incidents
}

// TestNewPoint: the new-operating-point rule (newpoint.go) on hand-made
// frames at 10 s. A T² excursion spread over the channels (first share
// 0.2) with SPE and res inside their limits is one notice and a Move, no
// incident; the model's taking it in is not judged; back within the
// limits, it is learned; a second excursion within accept_after is an
// incident like any other. A T² excursion of the same size that one
// channel explains (share 0.8) is an incident at once, with no notice.
// After a point is taken in, SPE over its limit for the on-delay escalates
// it to an incident (with SPE read as a break, Rules.NoPointByResidual).
// With the rule off the spread excursion is an incident.
func TestNewPoint(t *testing.T) {
	t.Run("spread", func(t *testing.T) {
		h, pl := pointHarness(t, Config{})
		h.pointFrames(0, 5, 0.5, 0.2, 0.2, false)
		h.pointFrames(5, 10, 1.5, 0.2, 0.2, false)
		if n, i := h.kinds(); n != 1 || i != 0 || len(pl.moves) != 1 {
			t.Fatalf("spread T² excursion: %d notices, %d incidents, moves %v; want 1, 0, [u]", n, i, pl.moves)
		}
		h.pointFrames(10, 40, 4, 3, 0.6, true) // the model takes the point in: wild statistics are not judged
		h.pointFrames(40, 100, 0.5, 0.2, 0.2, false)
		if n, i := h.kinds(); n != 1 || i != 0 {
			t.Fatalf("after the point was taken in: %d notices, %d incidents; want 1, 0", n, i)
		}
		if last := h.events[len(h.events)-1]; !hasEvent(h.events, EventPointEnd) {
			t.Errorf("no %s event (last %+v)", EventPointEnd, last)
		}
		h.pointFrames(100, 120, 1.5, 0.2, 0.2, false) // within accept_after of the first: an alert
		if n, i := h.kinds(); n != 1 || i != 1 || len(pl.moves) != 1 {
			t.Errorf("second excursion within accept_after: %d notices, %d incidents, %d moves; want 1, 1, 1", n, i, len(pl.moves))
		}
	})
	t.Run("one channel", func(t *testing.T) {
		h, pl := pointHarness(t, Config{})
		h.pointFrames(0, 10, 1.5, 0.2, 0.8, false)
		if n, i := h.kinds(); n != 0 || i != 1 || len(pl.moves) != 0 {
			t.Errorf("T² excursion on one channel: %d notices, %d incidents, %d moves; want 0, 1, 0", n, i, len(pl.moves))
		}
	})
	// SPE as a break: with the reading of newpointres.go on (the default),
	// SPE over its limit with res inside is more of the move, and res
	// escalates it (TestPointByResidual).
	t.Run("escalates", func(t *testing.T) {
		h, _ := pointHarness(t, Config{Rules: Rules{NoPointByResidual: true}})
		h.pointFrames(0, 10, 1.5, 0.2, 0.2, false)
		h.pointFrames(10, 40, 1.5, 0.2, 0.2, true)
		h.pointFrames(40, 60, 1.5, 2, 0.2, false)
		n, i := h.kinds()
		if n != 1 || i != 1 {
			t.Fatalf("SPE joining after the point was taken in: %d notices, %d incidents; want 1, 1", n, i)
		}
		for _, r := range h.recs {
			if r.Kind == KindIncident && !r.Start.After(sec(400)) {
				t.Errorf("incident %s starts at %v, before SPE went over its limit (400 s)", r.ID, r.Start)
			}
		}
	})
	// accept_after negative: nothing is ever taken as the new normal, so a
	// new operating point is not either; the excursion is an incident.
	t.Run("never accept", func(t *testing.T) {
		h, pl := pointHarness(t, Config{Rules: Rules{AcceptAfter: -1}})
		h.pointFrames(0, 10, 1.5, 0.2, 0.2, false)
		if n, i := h.kinds(); n != 0 || i != 1 || len(pl.moves) != 0 {
			t.Errorf("accept_after never: %d notices, %d incidents, %d moves; want 0, 1, 0", n, i, len(pl.moves))
		}
	})
	t.Run("off", func(t *testing.T) {
		h, pl := pointHarness(t, Config{Rules: Rules{NoNewPoint: true}})
		h.pointFrames(0, 10, 1.5, 0.2, 0.2, false)
		if n, i := h.kinds(); n != 0 || i != 1 || len(pl.moves) != 0 {
			t.Errorf("rule off: %d notices, %d incidents, %d moves; want 0, 1, 0", n, i, len(pl.moves))
		}
	})
}

// TestNewPointSnapshot: a snapshot taken while a point is being learned
// restores it: the restored engine publishes the same records as the one
// that went on.
func TestNewPointSnapshot(t *testing.T) {
	// T² stays over: the point escalates an hour after the notice.
	feed := func(h *harness, from, to float64) {
		for k := from; k < to; k++ {
			h.pointFrame(10*k, 1.5, 0.2, 0.2, k >= 10 && k < 40)
		}
	}
	whole, _ := pointHarness(t, Config{})
	feed(whole, 0, 500)
	first, _ := pointHarness(t, Config{})
	feed(first, 0, 20)
	second, _ := pointHarness(t, Config{})
	second.restore(first.snapshot())
	feed(second, 20, 500)
	got := append(first.recs, second.recs...)
	if len(got) != len(whole.recs) {
		t.Fatalf("%d records across the restart, %d without", len(got), len(whole.recs))
	}
	for i := range got {
		if got[i].ID != whole.recs[i].ID || got[i].Revision != whole.recs[i].Revision {
			t.Errorf("record %d: %s rev %d across the restart, %s rev %d without", i, got[i].ID, got[i].Revision, whole.recs[i].ID, whole.recs[i].Revision)
		}
	}
	if n, i := whole.kinds(); n != 1 || i != 1 {
		t.Errorf("T² still over its limit an hour after the notice: %d notices, %d incidents; want 1, 1", n, i)
	}
	var noted time.Time
	for _, r := range whole.recs {
		switch {
		case r.Kind == KindNotice:
			noted = r.Start
		case r.Kind == KindIncident && r.Start.Sub(noted) < PointSettle:
			t.Errorf("incident %s at %v: before the hour after the notice (%v)", r.ID, r.Start, noted)
		}
	}
}

func hasEvent(evs []Event, kind string) bool {
	for _, e := range evs {
		if e.Kind == kind {
			return true
		}
	}
	return false
}

// TestNewPointAllocs guards the per-frame path of the new-operating-point
// rule (testing.AllocsPerRun, as TestObserveAllocs, whose engine has no
// learner and so never runs the rule): no allocation within the limits,
// nor while a point is being learned, with the model taking it in or with
// its statistic still over its limit, spread over the channels: T² (SPE
// in), or SPE with T² and res in (the reading of newpointres.go). Only the
// frame that notes the point publishes a record.
func TestNewPointAllocs(t *testing.T) {
	cases := []struct {
		name     string
		channels []string
		shares   []float64
		k        int     // the statistic raised
		v, phi   float64 // its value and φ's, then
	}{
		{"T²", []string{"u.header.pressure", "u.pump1.dp", "u.pump2.dp"}, []float64{0.2, 0.4, 0.4}, 0, 15, 1.2},
		{"SPE off the plane", []string{"u.sub01.flow", "u.sub02.flow", "u.sub03.flow", "u.sub04.flow", "u.sub05.flow"},
			[]float64{0.2, 0.2, 0.2, 0.2, 0.2}, 1, 7.5, 1.2},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			e, err := NewEngine(Config{}, PublisherFunc(func(*Record) {}), &pointLog{}, nil)
			if err != nil {
				t.Fatal(err)
			}
			o := Observation{Unit: "u", ModelState: ModelAdapting,
				Stats: []Stat{{StatT2, 5, 10}, {StatSPE, 1, 5}, {StatPhi, 0.5, 1}, {StatResidual, 1, 8}}}
			for i, ch := range c.channels {
				s := c.shares[i]
				o.Contributors = append(o.Contributors, Contributor{Channel: ch, RBC: 4 * s, Limit: 0.3, Share: s, Modes: []int{0}})
			}
			step := stepper(t, e, &o)
			for range 10 {
				step()
			}
			if a := testing.AllocsPerRun(200, step); a != 0 {
				t.Errorf("within the limits: %v allocs per frame, want 0", a)
			}
			o.Stats[c.k].Value, o.Stats[2].Value = c.v, c.phi // 1.5 times its limit, spread
			for range 10 {
				step()
			}
			if u := e.units["u"]; !u.point.learning {
				t.Fatalf("no point is being learned after %s went over its limit, spread", c.name)
			}
			o.TakingIn = true
			if a := testing.AllocsPerRun(200, step); a != 0 {
				t.Errorf("taking a point in: %v allocs per frame, want 0", a)
			}
			o.TakingIn = false
			if a := testing.AllocsPerRun(200, step); a != 0 {
				t.Errorf("learning a point, still over its limit: %v allocs per frame, want 0", a)
			}
			if u := e.units["u"]; !u.point.learning || u.modelG.inAlarm {
				t.Errorf("the point escalated within the %v after its record (learning %v, model alarm %v)", PointSettle, u.point.learning, u.modelG.inAlarm)
			}
		})
	}
}
