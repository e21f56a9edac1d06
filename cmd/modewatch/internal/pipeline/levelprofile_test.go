package pipeline

import (
	"testing"
	"time"
)

// The normal level step is the largest |step| over the later half of the
// hourly blocks (design rule, no outside reference): an early large step
// is left out, a later one counts; past maxLevelBlocks blocks adjacent
// pairs merge and the halves stay in time order; a channel added later
// counts as having seen no step before; frames without steps count.
func TestLevelLearner(t *testing.T) {
	pr := &profiler{period: 30 * time.Minute} // 2 frames per hourly block
	frame := func(ok bool, s ...float64) { pr.addLevel(s, ok) }
	frame(true, 9)                         // block 0: an early step, left out
	frame(true, 1)                         //
	frame(true, -2)                        // block 1
	frame(false, 99)                       // no steps: ignored, but counts for the block
	frame(true, 0.5)                       // block 2
	frame(true, 0.5)                       //
	frame(true, 3)                         // block 3
	frame(true, -3.5, 4.0)                 // a second channel from here on
	if got := pr.levelMax(0); got != 3.5 { // blocks 2 and 3 of 4 closed (+ the open one: later half of 5 is 2…4)
		t.Errorf("channel 0: level %v, want 3.5 (the later half's largest)", got)
	}
	if got := pr.levelMax(1); got != 4 {
		t.Errorf("channel 1: level %v, want 4", got)
	}
	if got, want := len(pr.level.blocks[1]), len(pr.level.blocks[0]); got != want {
		t.Errorf("channel added later: %d blocks, the first channel %d", got, want)
	}
	if pr.levelMax(2) != 0 {
		t.Error("an unknown channel has a level")
	}

	// Beyond maxLevelBlocks: one large step early, one late.
	pr = &profiler{period: time.Hour} // 1 frame per block
	for k := 0; k < 3*maxLevelBlocks; k++ {
		v := 0.1
		switch k {
		case 10:
			v = 50 // in the first half: left out
		case 3*maxLevelBlocks - 10:
			v = 7 // in the second half
		}
		pr.addLevel([]float64{v}, true)
	}
	l := pr.level
	if len(l.blocks[0]) != l.nb || l.nb > maxLevelBlocks || l.per != 4 {
		t.Errorf("after %d blocks: %d kept (nb %d), %d frames each; want at most %d of 4", 3*maxLevelBlocks, len(l.blocks[0]), l.nb, l.per, maxLevelBlocks)
	}
	if got := pr.levelMax(0); got != 7 {
		t.Errorf("merged blocks: level %v, want 7", got)
	}
}
