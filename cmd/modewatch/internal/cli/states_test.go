package cli

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// TestFitStates: fit with a unit naming its state channel prints each
// operating state with its modes and the learned hold-off, and its JSON
// carries them; a channel of another unit that drives the unit is
// suggested as context (invented two-state plant; behaviour test).
func TestFitStates(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(31, 32))
	var b strings.Builder
	t0 := time.Date(2026, 7, 1, 0, 0, 0, 0, time.UTC)
	for k := 0; k < 6000; k++ {
		s := (k / 600) % 2
		d := math.Sin(float64(k)/80) + 0.1*rng.NormFloat64()
		x1, x2 := d+0.2*rng.NormFloat64(), -d+0.2*rng.NormFloat64()
		if s == 1 {
			x1, x2 = 8+2*d+0.2*rng.NormFloat64(), 3+0.2*rng.NormFloat64()
		}
		ts := t0.Add(time.Duration(k) * 10 * time.Second).UnixNano()
		fmt.Fprintf(&b, "mix,asset=a x1=%.4f,x2=%.4f,x3=%.4f %d\n", x1, x2, 0.5*d+0.2*rng.NormFloat64(), ts)
		fmt.Fprintf(&b, "ctl,asset=a mode=%di,drive=%.4f %d\n", s, d, ts)
	}
	log := filepath.Join(dir, "normal.lp")
	cfg := filepath.Join(dir, "c.yaml")
	if err := os.WriteFile(log, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(cfg, []byte("model: {warmup: 200}\nunits: [{name: mix, state: ctl.a.mode}]\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runCLI(t, "", "fit", "--quiet", "--config", cfg, "--input", log, "--out", filepath.Join(dir, "m.json"))
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"2 operating states by ctl.a.mode (hold-off after a switch:", "state 0: 3000 frames", "state 1: 3000 frames",
		"context suggestion: ctl.a.drive (unit ctl) explains"} {
		if !strings.Contains(out, want) {
			t.Errorf("fit output lacks %q:\n%s", want, out)
		}
	}
	code, js, errs := runCLI(t, "", "fit", "--quiet", "--json", "--config", cfg, "--input", log, "--out", filepath.Join(dir, "m2.json"))
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var o struct {
		Units []struct {
			Name      string                     `json:"name"`
			States    []struct{ Label string }   `json:"states"`
			HoldOff   *int                       `json:"state_hold_off_frames"`
			Suggested []struct{ Channel string } `json:"context_suggested"`
		} `json:"units"`
	}
	if err := json.Unmarshal([]byte(js), &o); err != nil {
		t.Fatal(err)
	}
	for _, u := range o.Units {
		if u.Name == "mix" && (len(u.States) != 2 || u.HoldOff == nil || len(u.Suggested) == 0) {
			t.Errorf("mix in --json: %+v", u)
		}
	}
}
