package pipeline

import (
	"cmp"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// spanOnDelay returns the on-delay n of m frames of alarm settings a at
// frame period period: the default on-delay (alerts.DefaultOnCount of
// alerts.DefaultOnWindow) widened to span a.OnSpan of plant time
// (alerts.DefaultOnSpan when zero) by alerts.SpanOnDelay; another
// on-delay only when a sets on_span.
func spanOnDelay(a configs.Alerts, n, m int, period time.Duration) (int, int) {
	if a.OnSpan <= 0 && (n != alerts.DefaultOnCount || m != alerts.DefaultOnWindow) {
		return n, m
	}
	return alerts.SpanOnDelay(n, m, period, cmp.Or(a.OnSpan, alerts.DefaultOnSpan))
}

// AlarmRuleAt is AlarmRule at frame period period: the on-delay the alarm
// engine uses there (AlertsConfigAt), which the budget calibration must
// run.
func AlarmRuleAt(c *configs.Config, name string, period time.Duration) alerts.AlarmRule {
	r := AlarmRule(c, name)
	a := c.Alerts.Over(configs.DefaultAlerts())
	if i := c.Unit(name); i >= 0 {
		a = c.UnitAlerts(i)
	}
	r.N, r.M = spanOnDelay(a, r.N, r.M, period)
	return r
}
