package pipeline

import (
	"testing"

	"modewatch/alerts"
	"modewatch/configs"
)

// checkBoolKey checks that an alerts key of type *bool reaches the alarm
// rules of the units, a unit's own value over the plant's, and that unset
// the alarm engine's default applies. set points the key in a, on reads
// the setting from the rules (true: the key's true).
func checkBoolKey(t *testing.T, set func(a *configs.Alerts) **bool, on func(alerts.Rules) bool, def bool) {
	t.Helper()
	yes, no := true, false
	c := &configs.Config{Units: []configs.Unit{{Name: "air"}, {Name: "boiler"}}}
	*set(&c.Alerts), *set(&c.Units[1].Alerts) = &yes, &no
	ac := AlertsConfig(c)
	if !on(ac.Rules) || !on(ac.Units["air"]) {
		t.Errorf("plant true: plant %v, air %v, want both true", on(ac.Rules), on(ac.Units["air"]))
	}
	if on(ac.Units["boiler"]) {
		t.Error("boiler's own false: got true")
	}
	if got := on(AlertsConfig(&configs.Config{}).Rules); got != def {
		t.Errorf("unset: %v, want the default %v", got, def)
	}
}

// TestNewPointResKey: alerts.new_point_res reaches the alarm rules
// (Rules.NoPointByResidual, its negation) as checkBoolKey says.
func TestNewPointResKey(t *testing.T) {
	checkBoolKey(t, func(a *configs.Alerts) **bool { return &a.NewPointRes },
		func(r alerts.Rules) bool { return !r.NoPointByResidual }, alerts.DefaultPointByResidual)
}
