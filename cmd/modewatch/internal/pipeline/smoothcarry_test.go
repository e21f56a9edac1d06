package pipeline

import (
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"modewatch/configs"
)

// TestCheckpointSmoothedAndVariance: with model.smoothing on and the
// variance statistic among the alarm statistics, a run cut in the middle,
// checkpointed and restored gives bit-identical alarm statistics (the
// smoothed ratios, the variance statistic) for the second half to an
// uninterrupted run. Restoring the same checkpoint without its smoothed
// ratios gives different ones, so the comparison can see them.
func TestCheckpointSmoothedAndVariance(t *testing.T) {
	const period = 20 * time.Second
	ch, frames := collectFrames(t, demoBytes(t, 4), period)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100, Smoothing: 0.1, Statistics: "t2,spe,phi,res,var"}}
	cfg.ApplyDefaults()

	// Each unit's alarm statistics per frame, as exact bit patterns.
	record := func(dst map[string][]string) func(u *Unit, _ time.Time) {
		return func(u *Unit, _ time.Time) {
			var b strings.Builder
			for _, s := range u.appendStats(nil) {
				fmt.Fprintf(&b, "%s=%x/%x ", s.Name, math.Float64bits(s.Value), math.Float64bits(s.Limit))
			}
			dst[u.Name] = append(dst[u.Name], b.String())
		}
	}
	whole := map[string][]string{}
	pa, err := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(whole)})
	if err != nil {
		t.Fatal(err)
	}
	runFrames(t, pa, frames, nil)

	half := len(frames) / 2
	first := map[string][]string{}
	pb, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(first)})
	runFrames(t, pb, frames[:half], nil)
	dir := t.TempDir()
	if _, err := pb.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	carried := 0
	for _, u := range pb.Units() {
		carried += len(u.smoothedState())
	}
	if carried == 0 {
		t.Fatal("no smoothed statistic to carry at the cut")
	}

	resume := func(dropSmoothed bool) (same bool, where string) {
		cks, errs := ReadCheckpoints(dir)
		if len(errs) > 0 || len(cks) == 0 {
			t.Fatalf("read %d checkpoints: %v", len(cks), errs)
		}
		if dropSmoothed {
			for _, ck := range cks {
				ck.Units[0].Smoothed = nil
			}
		}
		second := map[string][]string{}
		pc, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(second)})
		if restored, errs := pc.Restore(cks); len(errs) > 0 || len(restored) != len(cks) {
			t.Fatalf("restored %v: %v", restored, errs)
		}
		runFrames(t, pc, frames[half:], nil)
		for unit, all := range whole {
			if got, want := len(first[unit])+len(second[unit]), len(all); got != want {
				return false, fmt.Sprintf("unit %s: %d + %d frames scored, uninterrupted %d", unit, len(first[unit]), len(second[unit]), want)
			}
			for k, r := range second[unit] {
				if w := all[len(first[unit])+k]; r != w {
					return false, fmt.Sprintf("unit %s frame %d after restore:\n%s\nuninterrupted:\n%s", unit, k, r, w)
				}
			}
		}
		return true, ""
	}
	if same, where := resume(false); !same {
		t.Fatal(where)
	}
	if same, _ := resume(true); same {
		t.Error("dropping the smoothed ratios changed nothing: the test cannot see them")
	}
	// A damaged smoothed ratio is refused with the unit named.
	cks, _ := ReadCheckpoints(dir)
	cks[0].Units[0].Smoothed = []SmoothedStat{{Stat: "t2", Ratio: -1}}
	pd, _ := New(Options{Config: cfg, Channels: ch, Period: period})
	if _, errs := pd.Restore(cks[:1]); len(errs) != 1 || !strings.Contains(errs[0].Error(), cks[0].Units[0].Name) {
		t.Errorf("negative smoothed ratio: %v", errs)
	}
}
