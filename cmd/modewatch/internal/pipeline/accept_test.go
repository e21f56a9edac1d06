package pipeline

import (
	"path/filepath"
	"testing"

	"modewatch/configs"
)

// The recentring window after an acceptance asks for the unit's accept
// weight on every frame: it must not allocate (resolving the unit's
// settings does), and must keep giving the configured value.
func TestAcceptWeightReadOnceNoAlloc(t *testing.T) {
	cfg := &configs.Config{Units: []configs.Unit{{Name: "a", Alerts: configs.Alerts{AcceptWeight: 0.5}}}}
	u := &Unit{Name: "a", p: &Pipeline{cfg: cfg}}
	if w := u.acceptWeight(); w != 0.5 {
		t.Fatalf("acceptWeight = %v, want the configured 0.5", w)
	}
	if n := testing.AllocsPerRun(100, func() { _ = u.acceptWeight() }); n != 0 {
		t.Fatalf("acceptWeight allocates %v times a call, want 0", n)
	}
	d := &Unit{Name: "b", p: &Pipeline{cfg: cfg}}
	if w := d.acceptWeight(); w != DefaultAcceptWeight {
		t.Fatalf("acceptWeight of an unconfigured unit = %v, want the default %v", w, DefaultAcceptWeight)
	}
}

// TestExampleStatesPipelineDefaults: the shipped example configuration
// writes out the pipeline's own defaults (see the configs package's
// TestExampleStatesDefaults); they must be the constants declared here.
func TestExampleStatesPipelineDefaults(t *testing.T) {
	c, err := configs.Load(filepath.Join("..", "..", "..", "..", "configs", "modewatch.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if w := c.Alerts.AcceptWeight; w != DefaultAcceptWeight {
		t.Errorf("alerts.accept_weight: the example writes %v, the default is %v", w, DefaultAcceptWeight)
	}
	if f := c.Model.ResolutionFloor; f != DefaultResolutionFloor {
		t.Errorf("model.resolution_floor: the example writes %v, the default is %v", f, DefaultResolutionFloor)
	}
}
