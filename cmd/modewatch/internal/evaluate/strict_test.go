package evaluate

import (
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"

	"modewatch/alerts"
)

// ual is an alert of unit u from start to end (minutes after t0; end < 0:
// still open when the run ended).
func ual(id, u string, start, end float64, top ...string) Alert {
	a := Alert{ID: id, Unit: u, Start: at(start), Top: top}
	if end >= 0 {
		a.End = at(end)
	}
	return a
}

// TestComputeStrict checks the unit rule of Compute and the per-unit
// figures on hand-made alert lists over one day with two units, boiler and
// pump; every expected value is counted by hand from the doc comment of
// Compute.
func TestComputeStrict(t *testing.T) {
	day := 24 * time.Hour
	run := Run{From: t0, To: t0.Add(day), Grace: DefaultGrace, Units: []string{"boiler", "pump"}}
	e1 := ep("e1", 60, 120, "pump.p1.flow")

	t.Run("an alert of another unit during an episode is false and detects nothing", func(t *testing.T) {
		m := Compute([]Alert{ual("b", "boiler", 70, 100, "boiler.b1.temp", "pump.p1.flow")}, []Episode{e1}, run)
		if m.Detected != 0 || m.FalseAlerts != 1 || m.IsolatedTop3 != 0 || m.Matches[0].Alert != "" {
			t.Errorf("got detected %d false %d isolated %d match %+v, want 0 1 0 and no match", m.Detected, m.FalseAlerts, m.IsolatedTop3, m.Matches[0])
		}
		if u := m.Units[0]; u.Unit != "boiler" || u.Alerts != 1 || u.FalseAlerts != 1 {
			t.Errorf("boiler: %+v, want 1 alert, 1 false", u)
		}
	})

	t.Run("the unit's own alert detects; the other unit's one is still false", func(t *testing.T) {
		al := []Alert{
			ual("b", "boiler", 70, -1, "boiler.b1.temp"), // open to the end of the day
			ual("p", "pump", 90, 200, "pump.p1.flow"),    // detects e1 after 30 min, isolated
			ual("p2", "pump", 1400, -1, "pump.p1.speed"), // false, still open at the end
		}
		m := Compute(al, []Episode{e1}, run)
		if m.Detected != 1 || m.FalseAlerts != 2 || m.IsolatedTop3 != 1 || m.Matches[0].Alert != "p" {
			t.Fatalf("got detected %d false %d isolated %d match %+v, want 1 2 1 and alert p", m.Detected, m.FalseAlerts, m.IsolatedTop3, m.Matches[0])
		}
		// Run.False says the same of each alert: b and p2 are false, p is
		// not; a second pump alert inside e1 (± grace) is not false either.
		for _, c := range []struct {
			a    Alert
			want bool
		}{{al[0], true}, {al[1], false}, {al[2], true}, {ual("p3", "pump", 130, 140), false}} {
			if got := run.False(c.a, []Episode{e1}); got != c.want {
				t.Errorf("False(%s) = %v, want %v", c.a.ID, got, c.want)
			}
		}
		if *m.MedianDelayS != 1800 || *m.FalseAlertsPerDay != 2 {
			t.Errorf("median delay %v s, false per day %v; want 1800 and 2", *m.MedianDelayS, *m.FalseAlertsPerDay)
		}
		// boiler: no episode, normal time is the whole day (1440 min); its
		// alert is open from minute 70 to the end: 1370/1440, 1370 min long.
		// pump: normal time is the day minus e1 ± 15 min = [45, 135):
		// 1350 min; open in it [135, 200) and [1400, 1440): 105 min; the
		// longest alert is p, 110 min.
		want := []struct {
			unit            string
			alerts, falseN  int
			share, longestS float64
		}{
			{"boiler", 1, 1, 1370.0 / 1440, 1370 * 60},
			{"pump", 2, 1, 105.0 / 1350, 110 * 60},
		}
		if len(m.Units) != len(want) {
			t.Fatalf("units %+v", m.Units)
		}
		for i, w := range want {
			u := m.Units[i]
			if u.Unit != w.unit || u.Alerts != w.alerts || u.FalseAlerts != w.falseN || u.AlertOpenShareNormal == nil ||
				!scalar.EqualWithinAbsOrRel(*u.AlertOpenShareNormal, w.share, 1e-12, 1e-12) || u.LongestOpenAlertS != w.longestS {
				t.Errorf("unit %d: %+v (share %v), want %+v", i, u, u.AlertOpenShareNormal, w)
			}
		}
	})

	t.Run("a quality alert of the right channel isolates", func(t *testing.T) {
		end := at(100)
		recs := []*alerts.Record{
			{ID: "q", Kind: alerts.KindIncident, Unit: "pump", Start: at(65), End: &end,
				Quality: &alerts.RecordQuality{Kind: "stuck", Channel: "pump.p1.flow"}},
			{ID: "fl", Kind: alerts.KindFlood, Unit: "boiler", Start: at(61)}, // floods are not scored
		}
		m := Compute(AlertsOf(recs), []Episode{e1}, run)
		if m.Detected != 1 || m.IsolatedTop3 != 1 || m.FalseAlerts != 0 || m.Matches[0].Alert != "q" || *m.MedianDelayS != 300 {
			t.Errorf("got %+v, want q detecting e1 after 300 s, isolated, no false alert", m)
		}
		if m.Units[1].LongestOpenAlertS != 35*60 || *m.Units[1].AlertOpenShareNormal != 0 {
			t.Errorf("pump: %+v, want the 35 min alert inside the episode, nothing open in normal time", m.Units[1])
		}
	})

	t.Run("a quality alert of another channel of the unit detects without isolating", func(t *testing.T) {
		m := Compute([]Alert{ual("q", "pump", 65, 70, "pump.p1.speed")}, []Episode{e1}, run)
		if m.Detected != 1 || m.IsolatedTop3 != 0 {
			t.Errorf("detected %d isolated %d, want 1 0", m.Detected, m.IsolatedTop3)
		}
	})

	t.Run("the configuration's units win over the measurement prefix", func(t *testing.T) {
		// The header channel is measured by the boiler's gateway but
		// configured into the pump unit: a pump alert detects its fault.
		r := run
		r.UnitOf = func(ch string) string {
			if ch == "boiler.header.pressure" {
				return "pump"
			}
			return ""
		}
		e := ep("h", 60, 120, "boiler.header.pressure")
		m := Compute([]Alert{ual("b", "boiler", 70, 80), ual("p", "pump", 75, 80, "boiler.header.pressure")}, []Episode{e}, r)
		if m.Detected != 1 || m.Matches[0].Alert != "p" || m.FalseAlerts != 1 || m.Units[0].FalseAlerts != 1 {
			t.Errorf("got %+v, want p detecting h and the boiler alert false", m)
		}
	})

	t.Run("an episode across two units is detected by either", func(t *testing.T) {
		e := ep("x", 60, 120, "pump.p1.flow", "boiler.b1.temp")
		m := Compute([]Alert{ual("b", "boiler", 70, 80, "boiler.b1.temp")}, []Episode{e}, run)
		if m.Detected != 1 || m.FalseAlerts != 0 || m.IsolatedTop3 != 1 {
			t.Errorf("got %+v, want one isolated detection", m)
		}
	})

	t.Run("a unit without alerts reports a zero share", func(t *testing.T) {
		m := Compute(nil, []Episode{e1}, run)
		for _, u := range m.Units {
			if u.AlertOpenShareNormal == nil || *u.AlertOpenShareNormal != 0 || u.LongestOpenAlertS != 0 {
				t.Errorf("%+v, want share 0", u)
			}
		}
	})
}

// TestComputePastHold checks the bounded-hold check of Compute with a hold
// of 2 h on hand-made alerts over one day (minutes after t0, episode e1 of
// the pump from 60 to 120, grace 15 min: due at 135 + 120 = 255); every
// expected value is counted by hand from the doc comment of Compute.
func TestComputePastHold(t *testing.T) {
	day := 24 * time.Hour
	hold := func(u string) time.Duration {
		if u == "boiler" {
			return 0 // not checked
		}
		return 2 * time.Hour
	}
	run := Run{From: t0, To: t0.Add(day), Grace: DefaultGrace, Units: []string{"boiler", "pump"}, Hold: hold}
	e1 := ep("e1", 60, 120, "pump.p1.flow")
	al := []Alert{
		ual("p1", "pump", 70, 250, "pump.p1.flow"),      // in e1, ends before 255: fine
		ual("p2", "pump", 90, 300, "pump.p1.flow"),      // in e1, 45 min past 255
		ual("p3", "pump", 600, 700, "pump.p1.speed"),    // no episode: due 600 + 120 = 720, fine
		ual("p4", "pump", 1000, -1, "pump.p1.speed"),    // no episode, open to 1440: 320 min past 1120
		ual("b", "boiler", 70, -1, "boiler.b1.temp"),    // boiler: no hold, not checked
		ual("p5", "pump", 130, 260, "pump.p1.pressure"), // starts in the grace of e1: due 255, 5 min past
	}
	m := Compute(al, []Episode{e1}, run)
	if m.OpenPastHold == nil || *m.OpenPastHold != 3 {
		t.Fatalf("open past hold %v, want 3", m.OpenPastHold)
	}
	b, p := m.Units[0], m.Units[1]
	if b.OpenPastHold != 0 || b.LongestPastHoldS != 0 {
		t.Errorf("boiler: %d past hold, longest %v s; want 0 (no hold)", b.OpenPastHold, b.LongestPastHoldS)
	}
	if p.OpenPastHold != 3 || p.LongestPastHoldS != 320*60 {
		t.Errorf("pump: %d past hold, longest %v s; want 3 and %v", p.OpenPastHold, p.LongestPastHoldS, 320*60)
	}
	if m := Compute(al, []Episode{e1}, Run{From: t0, To: t0.Add(day), Grace: DefaultGrace}); m.OpenPastHold != nil || m.Units[1].OpenPastHold != 0 {
		t.Errorf("without a hold: %v past hold, pump %d; want null and 0", m.OpenPastHold, m.Units[1].OpenPastHold)
	}
}
