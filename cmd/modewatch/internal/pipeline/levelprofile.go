package pipeline

import (
	"math"
	"time"
)

// The level-shift rule's normal level (alerts.ChannelProfile.LevelStepMax):
// fit keeps, per channel, the largest absolute level step of each block of
// plant time (levelBlock) and takes the largest over the later half of the
// blocks, where the model has learned from at least half of the normal
// log. The early blocks are scored by a model learned on a few hours,
// whose relations are still loose: their steps would set the level too
// high.

// levelBlock is the plant time of one block of level-step maxima.
const levelBlock = time.Hour

// maxLevelBlocks bounds the blocks kept per channel: beyond it pairs of
// adjacent blocks are merged (their larger maximum), and the block
// doubles.
const maxLevelBlocks = 512

// levelLearner keeps the block maxima of the channels' level steps.
type levelLearner struct {
	per    int         // frames per block (at least 1)
	n      int         // frames in the current block
	nb     int         // blocks so far, the open one included (every channel's slice has this length)
	blocks [][]float64 // per channel: maxima of the closed blocks and, last, of the open one
}

// addLevel learns the level steps s of one frame (ok false: none this
// frame, which still counts for the block).
func (pr *profiler) addLevel(s []float64, ok bool) {
	l := &pr.level
	if l.per == 0 {
		l.per = 1
		if pr.period > 0 {
			l.per = max(1, int(levelBlock/pr.period))
		}
	}
	if l.nb == 0 {
		l.nb = 1
	}
	for len(l.blocks) < len(s) {
		l.blocks = append(l.blocks, make([]float64, l.nb)) // a channel added later saw no step before
	}
	if ok {
		for k, v := range s {
			b := l.blocks[k]
			if a := math.Abs(v); a > b[len(b)-1] && !math.IsInf(a, 0) {
				b[len(b)-1] = a
			}
		}
	}
	if l.n++; l.n < l.per {
		return
	}
	l.n = 0
	merge := l.nb == maxLevelBlocks
	if merge {
		l.nb, l.per = maxLevelBlocks/2, 2*l.per
	}
	for k, b := range l.blocks {
		if merge {
			for j := 0; j < len(b)/2; j++ {
				b[j] = math.Max(b[2*j], b[2*j+1])
			}
			b = b[:len(b)/2]
		}
		l.blocks[k] = append(b, 0)
	}
	l.nb++
}

// levelMax returns channel k's normal level step: the largest block
// maximum over the later half of the blocks (0 without any).
func (pr *profiler) levelMax(k int) float64 {
	if k >= len(pr.level.blocks) {
		return 0
	}
	b := pr.level.blocks[k]
	m := 0.0
	for _, v := range b[len(b)/2:] {
		m = math.Max(m, v)
	}
	return m
}
