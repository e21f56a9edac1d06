package pipeline

import (
	"testing"

	"modewatch/alerts"
	"modewatch/configs"
)

// TestNewPointResKey: alerts.new_point_res reaches the alarm rules of the
// units (Rules.PointByResidual), a unit's own value over the plant's;
// unset, the alarm engine's default (alerts.DefaultPointByResidual)
// applies.
func TestNewPointResKey(t *testing.T) {
	on, off := true, false
	c := &configs.Config{
		Alerts: configs.Alerts{NewPointRes: &on},
		Units:  []configs.Unit{{Name: "network"}, {Name: "store", Alerts: configs.Alerts{NewPointRes: &off}}},
	}
	ac := AlertsConfig(c)
	if !ac.Rules.PointByResidual || !ac.Units["network"].PointByResidual {
		t.Errorf("plant true: plant %v, network %v, want both true", ac.Rules.PointByResidual, ac.Units["network"].PointByResidual)
	}
	if ac.Units["store"].PointByResidual {
		t.Error("store's own false: got true")
	}
	if got := AlertsConfig(&configs.Config{}).Rules.PointByResidual; got != alerts.DefaultPointByResidual {
		t.Errorf("unset: %v, want the default %v", got, alerts.DefaultPointByResidual)
	}
}
