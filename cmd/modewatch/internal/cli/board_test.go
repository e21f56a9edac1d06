package cli

import (
	"math"
	"strings"
	"testing"
	"time"
)

// TestBoardNoResidualSpace: a unit whose modes span all its channels has an
// infinite SPE limit; the demo console says so in words, and the columns
// after it stay where they are.
func TestBoardNoResidualSpace(t *testing.T) {
	b := newBoard()
	now := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	b.units["full"] = &unitLine{t: now, state: "adapting", ready: true, t2: 2, t2l: 10, spe: 0, spel: math.Inf(1)}
	b.units["part"] = &unitLine{t: now, state: "adapting", ready: true, t2: 2, t2l: 10, spe: 1, spel: 4}
	out := b.render(nil)
	if strings.Contains(out, "Inf") || !strings.Contains(out, "no residual space") {
		t.Fatalf("board:\n%s", out)
	}
	lines := strings.Split(out, "\n")
	if len(lines) < 3 || strings.Index(lines[1], "adapting") != strings.Index(lines[2], "adapting") {
		t.Errorf("model column moved:\n%s", out)
	}
}
