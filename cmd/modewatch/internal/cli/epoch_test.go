package cli

import (
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/sim"
)

// TestReplayBefore1970: `modewatch replay` on a log dated before 1970 (the
// invented demo plant, with a stuck sensor so that alerts open) runs to the
// end and gives the same result as the same log a whole number of days
// later, after 1970. The log starts on 1969-12-31 at 20:00 UTC and crosses
// the epoch at its fourth hour, so alerts open at negative and positive Unix
// minutes. A whole-day shift keeps the plant's daily cycles in phase, so
// every count must agree exactly.
func TestReplayBefore1970(t *testing.T) {
	base := testkit.DemoScenario(t, 8*time.Hour)
	base.Episodes = []sim.Episode{{
		ID: "stuck", Kind: sim.Stuck, Channels: []string{"chill.chiller02.chw_return_temp"},
		Start: base.Start.Add(3 * time.Hour), End: base.Start.Add(5 * time.Hour),
	}}
	old := time.Date(1969, 12, 31, 20, 0, 0, 0, time.UTC)
	later := old.AddDate(56, 2, 0) // 2026-02-28 20:00 UTC, a whole number of days later
	run := func(start time.Time) summary {
		t.Helper()
		p, _ := scenarioLog(t, base.Rebase(start))
		code, out, errs := runCLI(t, "", "replay", "--quiet", "--json", p)
		if code != ExitOK {
			t.Fatalf("replay of a log starting %v: exit %d: %s", start, code, errs)
		}
		return decodeSummary(t, out)
	}
	a, b := run(old), run(later)
	if a.From == nil || a.From.After(old) || !a.From.After(old.Add(-time.Minute)) || a.To == nil || !a.To.After(time.Unix(0, 0)) {
		t.Fatalf("replayed span %v .. %v, want from about %v across the epoch", a.From, a.To, old)
	}
	if a.Alerts == 0 {
		t.Fatal("no alert opened: the per-minute alert counts were not exercised")
	}
	if a.Frames != b.Frames || a.Alerts != b.Alerts || a.Floods != b.Floods ||
		a.Lines.Accepted != b.Lines.Accepted || a.Lines.Rejected != b.Lines.Rejected || len(a.Units) != len(b.Units) {
		t.Fatalf("before 1970: %d frames, %d alerts, %d floods, %d/%d lines; after: %d, %d, %d, %d/%d",
			a.Frames, a.Alerts, a.Floods, a.Lines.Accepted, a.Lines.Rejected,
			b.Frames, b.Alerts, b.Floods, b.Lines.Accepted, b.Lines.Rejected)
	}
	for i := range a.Units {
		if a.Units[i].Name != b.Units[i].Name || a.Units[i].Frames != b.Units[i].Frames {
			t.Errorf("unit %s: %d frames before 1970, %s: %d after", a.Units[i].Name, a.Units[i].Frames, b.Units[i].Name, b.Units[i].Frames)
		}
	}
}
