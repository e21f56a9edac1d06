package pipeline

import (
	"testing"

	"modewatch/alerts"
	"modewatch/configs"
)

// TestSpreadRestartsHoldKey: alerts.spread_restarts_hold reaches the alarm
// rules of the units, a unit's own value over the plant's; unset, the
// alarm engine's default (alerts.DefaultSpreadRestartsHold) applies.
func TestSpreadRestartsHoldKey(t *testing.T) {
	on, off := true, false
	c := &configs.Config{
		Alerts: configs.Alerts{SpreadRestartsHold: &on},
		Units:  []configs.Unit{{Name: "air"}, {Name: "boiler", Alerts: configs.Alerts{SpreadRestartsHold: &off}}},
	}
	ac := AlertsConfig(c)
	if !ac.Rules.SpreadRestartsHold || !ac.Units["air"].SpreadRestartsHold {
		t.Errorf("plant true: plant %v, air %v, want both true", ac.Rules.SpreadRestartsHold, ac.Units["air"].SpreadRestartsHold)
	}
	if ac.Units["boiler"].SpreadRestartsHold {
		t.Error("boiler's own false: got true")
	}
	if got := AlertsConfig(&configs.Config{}).Rules.SpreadRestartsHold; got != alerts.DefaultSpreadRestartsHold {
		t.Errorf("unset: %v, want the default %v", got, alerts.DefaultSpreadRestartsHold)
	}
}
