package pipeline

import (
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
