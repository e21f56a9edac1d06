package pipeline

import (
	"strings"
	"testing"
	"time"

	"modewatch/configs"
)

// TestScoreEncoderNoAlloc: the score line is written for every unit and
// frame, so once the encoder's buffer has grown it allocates nothing, with
// every statistic of model.statistics on the line (the res, var and rel
// fields and their limits included).
func TestScoreEncoderNoAlloc(t *testing.T) {
	cfg, ch, frames := demoFrames(t, 3*time.Hour, configs.Model{WarmUp: 100, Statistics: "t2,spe,phi,res,var,rel"})
	p, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
	runFrames(t, p, frames, nil)
	var enc ScoreEncoder
	at := frames[len(frames)-1].Start
	for _, u := range p.units {
		enc.Reset()
		line := string(enc.Append(u, at))
		if err := enc.Err(); err != nil {
			t.Fatalf("unit %s: %v", u.Name, err)
		}
		for _, key := range []string{"t2=", "t2_limit=", "spe_limit=", "phi_limit=", "res=", "res_limit=", "var=", "var_limit=", "rel=", "rel_limit=", "missing=", "state=\""} {
			if !strings.Contains(line, key) {
				t.Errorf("unit %s: %q has no %s", u.Name, line, key)
			}
		}
		if n := testing.AllocsPerRun(100, func() { enc.Reset(); enc.Append(u, at) }); n != 0 {
			t.Errorf("unit %s: a score line allocates %v times", u.Name, n)
		}
	}
}
