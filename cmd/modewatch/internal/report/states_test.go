package report

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
)

// TestReportStates: a unit with operating states shows its current state
// and each state's modes as loadings charts (hand-made view).
func TestReportStates(t *testing.T) {
	mode := func(id int, l float64) pipeline.ModeView {
		return pipeline.ModeView{ID: id, Channels: []string{"mix.a.x1", "mix.a.x2"}, Loadings: []float64{l, -l}, VarianceShare: 0.5}
	}
	uv := pipeline.UnitView{Name: "mix", Channels: []string{"mix.a.x1", "mix.a.x2"}, ModelState: "adapting", State: "1",
		States: []pipeline.StateView{
			{Key: 0, Label: "0", Frames: 100, Fitted: true, Modes: []pipeline.ModeView{mode(1, 0.7)}},
			{Key: 1, Label: "1", Frames: 50, Fitted: true, Current: true, Modes: []pipeline.ModeView{mode(1, 0.6), mode(2, 0.5)}},
		}}
	dir := t.TempDir()
	index, err := Write(dir, &Input{Units: []pipeline.UnitView{uv}, Generated: time.Now()})
	if err != nil {
		t.Fatal(err)
	}
	page, err := os.ReadFile(index)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"Operating states", "in state 1.", "State 0, 100 frame(s)", "State 1 (current), 50 frame(s)"} {
		if !strings.Contains(string(page), want) {
			t.Errorf("report lacks %q", want)
		}
	}
	charts, _ := filepath.Glob(filepath.Join(dir, ChartDir, "*-state-*-mode-*.svg"))
	if len(charts) != 3 {
		t.Errorf("%d state mode charts, want 3", len(charts))
	}
}
