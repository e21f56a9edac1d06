package evaluate

import (
	"testing"
	"time"

	"modewatch/alerts"
)

// TestSilentAndNotice: a unit's silent alert (which names the unit, not a
// channel) isolates an outage episode of that unit but not a bias; a
// notice record is no alert at all (counted by hand).
func TestSilentAndNotice(t *testing.T) {
	end := at(100)
	recs := []*alerts.Record{
		{ID: "s1", Kind: alerts.KindIncident, Unit: "u", Start: at(61), End: &end,
			Quality: &alerts.RecordQuality{Kind: alerts.QualitySilent, Channel: "u"}},
		{ID: "s2", Kind: alerts.KindIncident, Unit: "u", Start: at(301),
			Quality: &alerts.RecordQuality{Kind: alerts.QualitySilent, Channel: "u"}},
		{ID: "n1", Kind: alerts.KindNotice, Unit: "u", Start: at(500), End: &end},
	}
	as := AlertsOf(recs)
	if len(as) != 2 || !as[0].Silent {
		t.Fatalf("alerts %+v: want the two silent alerts, the notice left out", as)
	}
	outage := Episode{ID: "o", Start: at(60), End: at(90), Kind: "outage", Channels: []string{"a", "b"}}
	bias := ep("b", 300, 360, "a")
	m := Compute(as, []Episode{outage, bias}, oneUnit(24*time.Hour, DefaultGrace))
	if m.Detected != 2 || m.IsolatedTop3 != 1 || m.FalseAlerts != 0 {
		t.Errorf("detected %d, isolated %d, false %d; want 2, 1 (the outage), 0", m.Detected, m.IsolatedTop3, m.FalseAlerts)
	}
}
