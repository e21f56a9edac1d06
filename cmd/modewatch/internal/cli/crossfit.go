package cli

import (
	"context"
	"fmt"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/configs"
)

// calibrationFolds returns alerts.calibration_folds of cfg (top level).
func calibrationFolds(cfg *configs.Config) int {
	return cfg.Alerts.Over(configs.DefaultAlerts()).CalibrationFolds
}

// heldOutRatios scores the normal log [from, to] for the budget
// calibration and returns, per unit and frame, the ratio of every alarm
// statistic to its limit, with the span of log each scoring model learned
// from (learnDays, for the days-needed estimate).
//
// With one fold, a model learned on the first pipeline.CalibrationShare
// of the log scores the rest. With K ≥ 2 folds the log is cut into K
// consecutive blocks of equal time and every block is scored by a model
// learned on the other K − 1 (cross-fitting, as in blocked
// cross-validation for serially correlated data: Bergmeir & Benítez 2012,
// Information Sciences 191), so that every frame of the log is held out
// once and each scoring model has learned on (K − 1)/K of it. The blocks
// are scored in time order into one recorder, so the calibration sees one
// series over the whole log. Scoring adapts as the service does, with
// two differences. It learns every frame whole: freeze_on_alert is off
// for it, which in the alarm engine also turns off the learning around
// open incidents by reconstruction (alerts.Rules.NoFreeze), so it neither
// freezes nor masks (the service masks; scoring the held-out part with
// the masking, measured on the realism suite, lost detections and raised
// the demo's false alerts: README, A persistence weight of learning).
// And it does not weigh frames by the persistence weight
// (model.persist): the held-out part is normal by the user's word, as
// the part the model learned on, where fit learns the weight's levels
// and weighs nothing; weighed, a held-out day that first visits an
// operating point the learned part did not show stays refused, and its
// block maxima (a jump that outlasts the half-day) leave no regular
// extreme-value fit.
func heldOutRatios(ctx context.Context, env IO, cfg *configs.Config, inputs []string, mf modelFlags, from, to time.Time, folds int) (*pipeline.RatioRecorder, float64, error) {
	quiet := runOutputs{quiet: true}
	cfgB := *cfg
	off := false
	cfgB.Alerts.FreezeOnAlert = &off
	cfgB.Model.Persist = -1 // negative: off (configs.Model.Persist)
	rec := pipeline.NewRatioRecorder()
	score := func(learn, held func(t time.Time) bool) error {
		outA := quiet
		outA.keep = learn
		resA, _, err := runEngine(ctx, env, cfg, inputs, nil, true, mf.halfLifeSet(), outA)
		if err != nil || resA == nil {
			return fmt.Errorf("learning on the other part of the log failed: %v", err)
		}
		modelA, errA := resA.Pipeline.Baseline()
		if len(modelA.Units) == 0 {
			return fmt.Errorf("no unit could be learned from the other part of the log: %v", errA)
		}
		outB := quiet
		outB.keep = held
		outB.onScore = rec.OnScore
		if _, _, err := runEngine(ctx, env, &cfgB, inputs, modelA, false, false, outB); err != nil {
			return fmt.Errorf("scoring the held-out part of the log failed: %v", err)
		}
		return nil
	}
	span := to.Sub(from)
	if folds <= 1 {
		split := from.Add(time.Duration(pipeline.CalibrationShare * float64(span)))
		err := score(func(t time.Time) bool { return t.Before(split) }, func(t time.Time) bool { return !t.Before(split) })
		return rec, split.Sub(from).Hours() / 24, err
	}
	// Block k holds the frames in [edge(k), edge(k+1)); the last block
	// also holds the frame at to.
	edge := func(k int) time.Time { return from.Add(time.Duration(float64(span) * float64(k) / float64(folds))) }
	for k := range folds {
		lo, hi := edge(k), edge(k+1)
		in := func(t time.Time) bool { return !t.Before(lo) && (t.Before(hi) || k == folds-1) }
		if err := score(func(t time.Time) bool { return !in(t) }, in); err != nil {
			return nil, 0, fmt.Errorf("block %d of %d: %w", k+1, folds, err)
		}
	}
	return rec, span.Hours() / 24 * float64(folds-1) / float64(folds), nil
}
