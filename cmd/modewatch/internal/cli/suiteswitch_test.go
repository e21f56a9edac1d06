package cli

import (
	"encoding/json"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs/realism"
	"modewatch/sim"
)

// TestPlantSwitches: on the compressor station's first normal day the
// swing machine's gated channels start and stop together with its status
// channel "running" (the plant's file: comp2_run steps between 0 and 1,
// held 1h30m), and the file's planned moves fall on their dates (checked
// by hand against configs/realism/compressor-station.yaml).
func TestPlantSwitches(t *testing.T) {
	var s *sim.Scenario
	for _, p := range realism.Plants() {
		if p.Name == "compressor-station" {
			var err error
			if s, err = sim.LoadBytes(p.File, p.YAML); err != nil {
				t.Fatal(err)
			}
		}
	}
	if s == nil {
		t.Fatal("no compressor-station plant")
	}
	sw, status, err := plantSwitches(s, s.Start, s.Start.Add(24*time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	if !status["boost.comp2.running"] || !status["inlet.scrubber.drain_valve"] || status["boost.comp2.speed"] {
		t.Errorf("status channels %v", status)
	}
	var starts, runs int
	for _, w := range sw {
		switch {
		case w.what == "boost.comp2.speed started":
			starts++
		case strings.HasPrefix(w.what, "boost.comp2.running 0→1"):
			runs++
		}
		if w.unit == "" {
			t.Errorf("a planned move on day 1: %+v", w)
		}
	}
	if starts == 0 || starts != runs {
		t.Errorf("day 1: %d starts of comp2's speed, %d of its running flag; want the same, more than 0", starts, runs)
	}
	sw, _, err = plantSwitches(s, s.Start.Add(9*24*time.Hour-time.Minute), s.Start.Add(9*24*time.Hour+time.Minute))
	if err != nil {
		t.Fatal(err)
	}
	if i := len(sw); i == 0 || sw[0].what != "move of discharge_sp" || !sw[0].t.Equal(s.Start.Add(9*24*time.Hour)) {
		t.Errorf("switches around day 9: %+v, want the discharge setpoint's move first", sw)
	}

	// switchAlerts over hand-made records: one 30 s after comp2 starts in
	// its unit (listed), one of the other unit at the same time (not),
	// one naming the status channel (listed), one inside a fault (not
	// false: not listed).
	var start time.Time
	for _, w := range sw0(t, s) {
		if w.what == "boost.comp2.speed started" {
			start = w.t
			break
		}
	}
	recs := []alerts.Record{
		{ID: "boost/a", Kind: alerts.KindIncident, Unit: "boost", Start: start.Add(30 * time.Second)},
		{ID: "inlet/b", Kind: alerts.KindIncident, Unit: "inlet", Start: start.Add(30 * time.Second)},
		{ID: "boost/c", Kind: alerts.KindIncident, Unit: "boost", Start: start.Add(time.Hour),
			Contributors: []alerts.RecordContributor{{Channel: "boost.comp1.power"}, {Channel: "boost.comp2.running"}}},
		{ID: "boost/d", Kind: alerts.KindIncident, Unit: "boost", Start: start.Add(10 * time.Second)},
	}
	var b strings.Builder
	enc := json.NewEncoder(&b)
	for _, r := range recs {
		if err := enc.Encode(r); err != nil {
			t.Fatal(err)
		}
	}
	all, status, _ := plantSwitches(s, s.Start, s.Start.Add(24*time.Hour))
	isFalse := func(unit string, at time.Time) bool { return !(unit == "boost" && at.Equal(start.Add(10*time.Second))) }
	got, err := readSwitchAlerts(strings.NewReader(b.String()), "alerts.jsonl", isFalse, all, status)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || !strings.HasPrefix(got[0], "boost/a (30s after boost.comp2") || !strings.HasPrefix(got[1], "boost/c (names status channel boost.comp2.running") {
		t.Errorf("alerts at a switch %q", got)
	}
	// A planned move counts over its ramp (the discharge setpoint's on day
	// 9 takes 30 min) and suiteSwitchWindow after it: an alert 25 min into
	// the ramp is listed, one 35 min after its start is not.
	move := s.Start.Add(9 * 24 * time.Hour)
	mv, _, err := plantSwitches(s, move.Add(-time.Minute), move.Add(time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	b.Reset()
	for _, r := range []alerts.Record{
		{ID: "inlet/ramp", Kind: alerts.KindIncident, Unit: "inlet", Start: move.Add(25 * time.Minute)},
		{ID: "inlet/after", Kind: alerts.KindIncident, Unit: "inlet", Start: move.Add(35 * time.Minute)},
	} {
		if err := enc.Encode(r); err != nil {
			t.Fatal(err)
		}
	}
	anyFalse := func(string, time.Time) bool { return true }
	got, err = readSwitchAlerts(strings.NewReader(b.String()), "alerts.jsonl", anyFalse, mv, status)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 || got[0] != "inlet/ramp (25m0s after move of discharge_sp)" {
		t.Errorf("alerts at a move %q, want only the one inside its ramp", got)
	}
}

// sw0 returns the compressor station's switches of its first day.
func sw0(t *testing.T, s *sim.Scenario) []suiteSwitch {
	t.Helper()
	sw, _, err := plantSwitches(s, s.Start, s.Start.Add(24*time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	return sw
}
