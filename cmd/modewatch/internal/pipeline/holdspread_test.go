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
	checkBoolKey(t, func(a *configs.Alerts) **bool { return &a.SpreadRestartsHold },
		func(r alerts.Rules) bool { return r.SpreadRestartsHold }, alerts.DefaultSpreadRestartsHold)
}
