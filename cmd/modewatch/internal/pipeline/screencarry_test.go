package pipeline

import (
	"encoding/json"
	"fmt"
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/stream"
)

// TestCheckpointScreenState: on the data-quality test plant (profile_test.go)
// started from its fitted normal day, a run cut in the middle of a
// data-quality condition, checkpointed and restored (fed again from 10
// frames before the cut, as redelivery does) publishes exactly the alert
// records of the uninterrupted run after the cut, for each rule whose
// state runs over frames:
//
//	stuck    flow frozen, cut 10 frames into the flat run (before the alert)
//	spikes   flow spiking +15 every 15 frames, cut after 3 spikes (before
//	         the alert)
//	missing  level's readings gone, cut a few frames into the gap (within
//	         its normal longest gap, before the missing hold runs)
//	silent   the press unit's gateway silent, cut inside the outage (the
//	         screen recomputes silence every frame; the open alert is the
//	         alarm engine's state)
//
// The reference is the uninterrupted run itself (behaviour test). For the
// first three, the same checkpoint restored without its screen runs
// (ModelUnit.Screen dropped, as a version 3 checkpoint, which restores)
// publishes
// different records, so the comparison sees the carried state.
func TestCheckpointScreenState(t *testing.T) {
	cfg := qConfig(t)
	m := qFit(t, cfg)
	const (
		freezeFrom, freezeTo = qDay + 200, qDay + 440
		spikeFrom, spikeTo   = qDay + 600, qDay + 900
		dropFrom, dropTo     = qDay + 1000, qDay + 1090
		quietFrom, quietTo   = qDay + 1150, qDay + 1200
		end                  = qDay + 1300
	)
	ev := qEvents{
		frozen: func(k int) bool { return k >= freezeFrom && k < freezeTo },
		spike: func(k int) float64 {
			if k >= spikeFrom && k < spikeTo && (k-spikeFrom)%15 == 0 {
				return 15
			}
			return 0
		},
		drop:   func(k int) bool { return k >= dropFrom && k < dropTo },
		silent: func(k int, u string) bool { return u == "press" && k >= quietFrom && k < quietTo },
	}
	ch, frames := collectFrames(t, qPlant(qDay, end, ev, 4), qPeriod)
	// at returns the index of the frame of plant frame k.
	at := func(k int) int {
		t0 := qStart.Add(time.Duration(k) * qPeriod)
		return slices.IndexFunc(frames, func(f stream.Frame) bool { return !f.Start.Before(t0) })
	}
	type rec struct {
		updated time.Time
		kind    string // quality kind/channel, "" for others
		json    string
	}
	publisher := func(dst *[]rec) alerts.Publisher {
		return alerts.PublisherFunc(func(r *alerts.Record) {
			b, err := json.Marshal(r)
			if err != nil {
				t.Fatal(err)
			}
			kind := ""
			if r.Quality != nil {
				kind = r.Quality.Kind + "/" + r.Quality.Channel
			}
			*dst = append(*dst, rec{r.Updated, kind, string(b)})
		})
	}
	newPipe := func(pub alerts.Publisher) *Pipeline {
		p, err := New(Options{Config: cfg, Channels: ch, Period: qPeriod, Baseline: m, Publisher: pub})
		if err != nil {
			t.Fatal(err)
		}
		return p
	}
	var whole []rec
	runFrames(t, newPipe(publisher(&whole)), frames, nil)

	cases := []struct {
		name, kind string // kind: the record kind/channel the cut is inside
		cut        int    // plant frame
		sees       bool   // whether dropping the screen runs must change the records
	}{
		{"stuck", alerts.QualityStuck + "/press.line.flow", freezeFrom + 10, true},
		{"spikes", alerts.QualitySpikes + "/press.line.flow", spikeFrom + 35, true},
		{"missing", alerts.QualityMissing + "/feed.tank.level", dropFrom + 6, true},
		{"silent", alerts.QualitySilent + "/press", quietFrom + 20, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cut := at(c.cut)
			boundary := frames[cut-1].Start
			var want []string
			raised := false
			for _, r := range whole {
				if r.updated.After(boundary) {
					want = append(want, r.json)
					raised = raised || r.kind == c.kind
				}
			}
			if !raised {
				t.Fatalf("the uninterrupted run has no %s record after the cut: the case tests nothing", c.kind)
			}
			pb := newPipe(nil)
			runFrames(t, pb, frames[:cut], nil)
			dir := t.TempDir()
			if _, err := pb.WriteCheckpoints(dir); err != nil {
				t.Fatal(err)
			}
			resume := func(edit func(*ModelFile)) []string {
				cks, errs := ReadCheckpoints(dir)
				if len(errs) > 0 || len(cks) != 2 {
					t.Fatalf("read %d checkpoints: %v", len(cks), errs)
				}
				carried := 0
				for _, ck := range cks {
					carried += len(ck.Units[0].Screen)
					if edit != nil {
						edit(ck)
					}
				}
				if carried == 0 {
					t.Fatal("the checkpoint carries no screen runs")
				}
				var got []rec
				pc := newPipe(publisher(&got))
				if restored, errs := pc.Restore(cks); len(errs) > 0 || len(restored) != 2 {
					t.Fatalf("restored %v: %v", restored, errs)
				}
				runFrames(t, pc, frames[cut-10:], nil)
				var out []string
				for _, r := range got {
					out = append(out, r.json)
				}
				return out
			}
			if got := resume(nil); !slices.Equal(got, want) {
				t.Errorf("records after the restart differ from the uninterrupted run's:\n%s", recordDiff(got, want))
			}
			// A version 3 checkpoint (no screen runs) still restores, with
			// every run starting empty.
			if c.sees && slices.Equal(resume(func(ck *ModelFile) { ck.Version, ck.Units[0].Screen = 3, nil }), want) {
				t.Error("control: restored without the screen runs, the records are the same: the case cannot see them")
			}
		})
	}
}

// recordDiff describes where two record lists first differ.
func recordDiff(got, want []string) string {
	for i := range min(len(got), len(want)) {
		if got[i] != want[i] {
			return fmt.Sprintf("record %d:\n got  %s\n want %s", i, got[i], want[i])
		}
	}
	return fmt.Sprintf("%d records, want %d", len(got), len(want))
}
