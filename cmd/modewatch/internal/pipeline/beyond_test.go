package pipeline

import (
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// TestSecondFaultBeyond: a strong fault on the pump (8σ on one channel),
// then, while it persists, a weaker one on the dryer of the same unit
// (3σ): the dryer's channel rarely leads a frame the pump's channel
// dominates. With alerts.beyond_incidents the frame scored with the
// pump incident's channels reconstructed is led by the dryer's channel,
// and the dryer gets an incident of its own, located at its own
// equipment, as early after its fault as on a quiet unit (a 3σ fault on
// a quiet bench is reported within minutes; 10 min allowed). Invented
// data (seeded).
func TestSecondFaultBeyond(t *testing.T) {
	on := true
	b, t1, t2 := twoFaultBench(3, 8, 3)
	without := replayBench(t, b, configs.Alerts{})
	t.Logf("defaults (without beyond_incidents):%s", describe(without))
	if p, d := pumpAndDryer(without, t1, t2); p != nil && d != nil && p != d {
		t.Logf("(the defaults reported the dryer too)")
	}
	rs := replayBench(t, b, configs.Alerts{BeyondIncidents: &on})
	t.Logf("with beyond_incidents:%s", describe(rs))
	pump, dryer := pumpAndDryer(rs, t1, t2)
	if pump == nil || dryer == nil || pump == dryer {
		t.Fatalf("want one incident for the pump and another for the dryer")
	}
	if slices.Contains(dryer.Location, benchChannel(1)) {
		t.Errorf("the dryer's incident holds the pump's channel: %v", dryer.Location)
	}
	if d := dryer.Start.Sub(t2); d > 10*time.Minute {
		t.Errorf("the second fault took %v to be reported", d)
	}
	if pump.End != nil && pump.EndReason == alerts.EndMerged {
		t.Errorf("the pump's incident merged into %s", pump.MergedInto)
	}
}
