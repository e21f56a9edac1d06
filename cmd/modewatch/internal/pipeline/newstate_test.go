package pipeline

import (
	"bytes"
	"context"
	"slices"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
)

// sFit fits cfg on the normal days of the two-state plant and returns the
// model file.
func sFit(t *testing.T, cfg *configs.Config) *ModelFile {
	t.Helper()
	return fitBytes(t, cfg, sPlant(0, sNormal, nil, nil, 1, 0, false))
}

// TestNewStateLearnedAfterAcceptAfter: a state never seen in the fitted
// model is learned for alerts.accept_after of its own frames before its
// statistics may start incidents, like any new normal (behaviour test on
// the invented two-state plant of states_test.go). The test day reads mode
// 2 (never fitted) in state 1's periods, 1080 frames each; x3 carries the
// +1.0 bias (3.3 σ of its noise) in the first new-state period, after the
// 500 warm-up frames, or (another run) in the third. With accept_after 4h
// (1440 frames of the new state: the whole first period and 360 frames of
// the second) the early bias starts no incident, the late one does, and two
// notices say the state is new and then learned, at its 1440th frame.
// With accept_after 1h (360 frames, shorter than the warm-up) the first
// bias starts an incident: the hold is what kept it quiet.
func TestNewStateLearnedAfterAcceptAfter(t *testing.T) {
	const (
		newStart   = sNormal + 1080 // the first new-state frame
		early, end = newStart + 650, newStart + 950
		late       = sNormal + 5400 + 300 // third new-state period
		lateEnd    = late + 400
		learnAt    = sNormal + 3240 + 360 - 1 // 1440th frame of the new state
	)
	earlyFault := func(k int) bool { return k >= early && k < end }
	lateFault := func(k int) bool { return k >= late && k < lateEnd }
	fitCfg := sConfig(t, "units: [{name: mix, state: ctl.a.mode, state_bands: [0.5, 1.5]}]\n")
	m := sFit(t, fitCfg)
	at := func(k int) time.Time { return sStart.Add(time.Duration(k) * sPeriod) }
	run := func(acceptAfter string, fault func(int) bool) (earlyInc, lateInc int, notices []*alerts.Record, p *Pipeline) {
		data := bytes.ReplaceAll(sPlant(sNormal, sNormal+8640, nil, fault, 2, 0, false), []byte("mode=1i"), []byte("mode=2i"))
		cfg := sConfig(t, "units: [{name: mix, state: ctl.a.mode, state_bands: [0.5, 1.5]}]\nalerts: {accept_after: "+acceptAfter+"}\n")
		_, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(data), Baseline: m,
			Prepare: func(pl *Pipeline) error { p = pl; return nil },
			Publisher: alerts.PublisherFunc(func(r *alerts.Record) {
				if r.Unit != "mix" || r.Revision != 1 {
					return
				}
				switch {
				case r.Kind == alerts.KindNotice:
					c := *r
					notices = append(notices, &c)
				case r.Kind == alerts.KindIncident && r.Group == alerts.GroupModel:
					t.Logf("%s incident at frame %d", acceptAfter, int(r.Start.Sub(sStart)/sPeriod)-sNormal)
					switch s := r.Start; {
					case !s.Before(at(early)) && s.Before(at(end+30)):
						earlyInc++
					case !s.Before(at(late)) && s.Before(at(lateEnd+30)):
						lateInc++
					}
				}
			})})
		if err != nil {
			t.Fatal(err)
		}
		return earlyInc, lateInc, notices, p
	}

	earlyInc, _, notices, p := run("4h", earlyFault)
	if earlyInc != 0 {
		t.Errorf("accept_after 4h: %d incidents from the bias inside the new state's first 4h, want 0", earlyInc)
	}
	if len(notices) != 2 {
		t.Fatalf("accept_after 4h: %d notices, want 2 (new, learned): %+v", len(notices), notices)
	}
	if !notices[0].Start.Equal(at(newStart)) {
		t.Errorf("new-state notice at %v, want the state's first frame %v", notices[0].Start, at(newStart))
	}
	if !notices[1].Start.Equal(at(learnAt)) {
		t.Errorf("learned notice at %v, want the new state's 1440th frame %v", notices[1].Start, at(learnAt))
	}
	if v := p.Unit("mix").View(time.Time{}); len(v.States) != 3 || v.States[2].Fitted || v.States[2].Learning {
		t.Errorf("after the run: states %+v, want a third state, learned online and no longer learning", v.States)
	}

	if _, lateInc, _, _ := run("4h", lateFault); lateInc == 0 {
		t.Error("accept_after 4h: no incident from the bias after the new state was learned")
	}
	if earlyInc, _, _, _ := run("1h", earlyFault); earlyInc == 0 {
		t.Error("accept_after 1h: the bias inside the new state's first period started no incident; the 4h case proves nothing")
	}
}

// TestNewStateLearningSurvivesRestart: a checkpoint written 700 frames
// into the new state's first period (inside its 1440 frames of learning
// under accept_after 4h) and restored into a new pipeline from the same
// fitted model keeps the state new and learning: the bias later in that
// period starts no incident, and the learned notice comes at the state's
// 1440th frame, as in the uninterrupted run.
func TestNewStateLearningSurvivesRestart(t *testing.T) {
	const (
		newStart = sNormal + 1080
		early    = newStart + 750
		end      = newStart + 1000
		learnAt  = sNormal + 3240 + 360 - 1
	)
	cfg := sConfig(t, "units: [{name: mix, state: ctl.a.mode, state_bands: [0.5, 1.5]}]\nalerts: {accept_after: 4h}\n")
	m := sFit(t, cfg)
	fault := func(k int) bool { return k >= early && k < end }
	data := bytes.ReplaceAll(sPlant(sNormal, sNormal+4000, nil, fault, 2, 0, false), []byte("mode=1i"), []byte("mode=2i"))
	ch, frames := collectFrames(t, data, sPeriod)
	var incidents int
	var learned []time.Time
	pub := alerts.PublisherFunc(func(r *alerts.Record) {
		switch {
		case r.Unit != "mix" || r.Revision != 1:
		case r.Kind == alerts.KindNotice && strings.Contains(r.ID, ":learned"):
			learned = append(learned, r.Start)
		case r.Kind == alerts.KindIncident && r.Group == alerts.GroupModel && !r.Start.Before(sStart.Add(early*sPeriod)):
			incidents++
		}
	})
	cut := slices.IndexFunc(frames, func(f stream.Frame) bool { return !f.Start.Before(sStart.Add((newStart + 700) * sPeriod)) })
	pa, err := New(Options{Config: cfg, Channels: ch, Period: sPeriod, Baseline: m, Publisher: pub})
	if err != nil {
		t.Fatal(err)
	}
	runFrames(t, pa, frames[:cut], nil)
	dir := t.TempDir()
	if _, err := pa.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	cks, errs := ReadCheckpoints(dir)
	if len(errs) > 0 {
		t.Fatal(errs)
	}
	pb, err := New(Options{Config: cfg, Channels: ch, Period: sPeriod, Baseline: m, Publisher: pub})
	if err != nil {
		t.Fatal(err)
	}
	if _, errs := pb.Restore(cks); len(errs) > 0 {
		t.Fatal(errs)
	}
	if v := pb.Unit("mix").View(time.Time{}); len(v.States) != 3 || v.States[2].Fitted || !v.States[2].Learning {
		t.Fatalf("restored states %+v, want the third new and learning", v.States)
	}
	runFrames(t, pb, frames[cut:], nil)
	if incidents != 0 {
		t.Errorf("%d incidents from the bias inside the new state's learning, after the restart", incidents)
	}
	if len(learned) != 1 || !learned[0].Equal(sStart.Add(learnAt*sPeriod)) {
		t.Errorf("learned notices %v, want one at %v", learned, sStart.Add(learnAt*sPeriod))
	}
}
