package pipeline

import (
	"testing"

	"modewatch/alerts"
	"modewatch/configs"
)

// TestNewPointResKey: alerts.new_point_res reaches the alarm rules of the
// units (Rules.NoPointByResidual its negation), a unit's own value over the plant's;
// unset, the alarm engine's default (alerts.DefaultPointByResidual)
// applies.
func TestNewPointResKey(t *testing.T) {
	on, off := true, false
	c := &configs.Config{
		Alerts: configs.Alerts{NewPointRes: &on},
		Units:  []configs.Unit{{Name: "network"}, {Name: "store", Alerts: configs.Alerts{NewPointRes: &off}}},
	}
	ac := AlertsConfig(c)
	if ac.Rules.NoPointByResidual || ac.Units["network"].NoPointByResidual {
		t.Errorf("plant true: plant off %v, network off %v, want both on", ac.Rules.NoPointByResidual, ac.Units["network"].NoPointByResidual)
	}
	if !ac.Units["store"].NoPointByResidual {
		t.Error("store's own false: got on")
	}
	if got := !AlertsConfig(&configs.Config{}).Rules.NoPointByResidual; got != alerts.DefaultPointByResidual {
		t.Errorf("unset: %v, want the default %v", got, alerts.DefaultPointByResidual)
	}
}
