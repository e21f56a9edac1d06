package pipeline

import (
	"testing"
	"time"

	"modewatch/configs"
	"modewatch/tracker"
)

// model.persist reaches the tracker: while fitting, the persistence
// weight's normal levels are learned and every frame weighed 1 (the log is
// normal by the user's word); in replay and run the weight applies. An
// unset key leaves the tracker's default.
func TestLearnSettingsPersist(t *testing.T) {
	for _, fit := range []bool{true, false} {
		p := &Pipeline{opt: Options{Fit: fit}}
		var cfg tracker.Config
		p.learnSettings(&cfg, configs.Model{Persist: 3}, 20*time.Second)
		if cfg.Persist != 3 || cfg.PersistLevelsOnly != fit {
			t.Errorf("fit %v: Persist %v, PersistLevelsOnly %v; want 3, %v", fit, cfg.Persist, cfg.PersistLevelsOnly, fit)
		}
		cfg = tracker.Config{}
		p.learnSettings(&cfg, configs.Model{}, 20*time.Second)
		if cfg.Persist != 0 {
			t.Errorf("fit %v: unset model.persist gave Persist %v, want 0 (the tracker's default)", fit, cfg.Persist)
		}
	}
}
