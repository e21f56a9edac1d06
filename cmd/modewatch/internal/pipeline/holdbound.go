package pipeline

import (
	"time"

	"modewatch/configs"
)

// relearnSpan is the plant time a unit's model takes to take an accepted
// incident's state in at frame period period (alerts.Rules.RelearnSpan):
// the frame after the acceptance, which starts the recentring window, the
// window's recentreFrames frames and the refresh at its end (learnMask),
// plus the model's score lag, by which the scoring model trails the
// learned one. 0 when the period is not known (the alarm settings alone).
// The bounded hold accepts that much and the off-delay before
// accept_after, so that a flat incident has closed by then.
func relearnSpan(m configs.Model, period time.Duration) time.Duration {
	if period <= 0 {
		return 0
	}
	return time.Duration(recentreFrames+1)*period + max(m.ScoreLag, 0)
}
