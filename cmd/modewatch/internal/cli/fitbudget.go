package cli

import (
	"context"
	"fmt"
	"math"
	"strings"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/configs"
)

// budgetFor returns alerts.budget for unit name (its own setting, else the
// top-level one, else the default); ≤ 0 means off.
func budgetFor(cfg *configs.Config, name string) float64 {
	if i := cfg.Unit(name); i >= 0 {
		return cfg.UnitAlerts(i).Budget
	}
	return cfg.Alerts.Over(configs.DefaultAlerts()).Budget
}

// calibrateBudgets calibrates every unit of the fitted model to its
// alerts.budget (pipeline.CalibrateBudget): it scores held-out normal
// frames with the settings the service uses (heldOutRatios: by default a
// model learned on the first pipeline.CalibrationShare of the log scores
// the rest; with alerts.calibration_folds every block of the log is scored
// by a model of the others), records the ratio of every alarm statistic to
// its limit, and sets each unit's Calibration. It returns lines for the summary: which
// setting wins, units left uncalibrated and why.
func calibrateBudgets(ctx context.Context, env IO, cfg *configs.Config, inputs []string, mf modelFlags, model *pipeline.ModelFile) []string {
	any := false
	for _, u := range model.Units {
		if budgetFor(cfg, u.Name) > 0 {
			any = true
		}
	}
	if !any {
		return nil
	}
	var notes []string
	for _, in := range inputs {
		if in == "-" {
			return []string{"alerts.budget: not calibrated (standard input cannot be read twice); the limits are those of alpha"}
		}
	}
	rec, learnDays, err := heldOutRatios(ctx, env, cfg, inputs, mf, model.From, model.To, calibrationFolds(cfg))
	if err != nil {
		return []string{fmt.Sprintf("alerts.budget: not calibrated: %v", err)}
	}
	if cfg.Alerts.Over(configs.DefaultAlerts()).CalibrationShape == configs.ShapeShared {
		notes = append(notes, poolShape(rec, cfg, model)...)
	}
	for i := range model.Units {
		u := &model.Units[i]
		b := budgetFor(cfg, u.Name)
		if b <= 0 {
			continue
		}
		perStat := cfg.AlertsFor(u.Name).BudgetPerStatistic
		accept, points := pipeline.CalibratesPoints(cfg, u.Name)
		cal, err := rec.Calibrate(u.Name, b, pipeline.AlarmRuleAt(cfg, u.Name, time.Duration(model.Period)), learnDays,
			perStat != nil && *perStat, points, accept)
		if err != nil {
			msg := fmt.Sprintf("warning: unit %s not calibrated to alerts.budget (limits of alpha kept): %v", u.Name, err)
			if cal.DaysNeeded > 0 {
				msg += fmt.Sprintf("; about %.1f days of normal log needed", cal.DaysNeeded)
			}
			notes = append(notes, msg)
			continue
		}
		u.Calibration = &cal
	}
	if mf.set["alpha"] || (cfg.Model.Alpha != 0 && cfg.Model.Alpha != configs.DefaultAlpha) {
		notes = append(notes, "alerts.budget and alpha are both set: the budget wins (its calibrated scale multiplies the limits of alpha)")
	}
	return notes
}

// printCalibration prints a unit's budget calibration under its fit line.
func printCalibration(env IO, u pipeline.ModelUnit) {
	c := u.Calibration
	if c == nil {
		return
	}
	th := ""
	if u.Limits.T2 != nil && u.Limits.SPE != nil {
		th = fmt.Sprintf(" (T² %.2f, SPE %.2f)", c.Scale**u.Limits.T2, c.Scale**u.Limits.SPE)
	}
	shared := ""
	if c.SharedShape {
		shared = fmt.Sprintf(", shape ξ %.3f shared by the units", c.Xi)
	}
	fmt.Fprintf(env.Out, "  budget %.3g false alerts/day: limits ×%.3f%s; expected %.3g/day (rate's 95%% interval %.3g to %.3g); held-out %.1f days: %d alerts of the whole rule at this scale; GEV of %d block maxima of %v%s\n",
		c.Budget, c.Scale, th, c.Rate, c.RateLow, c.RateHigh, c.HeldOutDays, c.Observed, c.Blocks, time.Duration(c.Block).Round(time.Second), shared)
	if w := c.Predict(pipeline.PredictWeekDays); !math.IsNaN(w.Coverage) {
		fmt.Fprintf(env.Out, "  a week of normal running should bring %d to %d false alerts (95%% predictive: the rate's uncertainty and chance together; %.2g expected)\n",
			w.Low, w.High, w.Expected)
	}
	if len(c.Scales) > 0 {
		fmt.Fprintf(env.Out, "  per statistic (same tail probability, the whole rule at the budget):")
		for _, n := range pipeline.StatisticNames() {
			if v, ok := c.Scales[n]; ok {
				fmt.Fprintf(env.Out, " %s ×%.3f", n, v)
			}
		}
		fmt.Fprintln(env.Out)
	}
	if c.GEVScale > 0 {
		fmt.Fprintf(env.Out, "  the extreme-value scale ×%.3f opened more alerts over the held-out days than the budget allows there; raised to ×%.3f\n", c.GEVScale, c.Scale)
	}
	if c.DaysNeeded > 0 {
		fmt.Fprintf(env.Out, "  warning: the normal log is too short for this budget: the interval is wider than a factor 2; about %.1f days of normal log needed\n", c.DaysNeeded)
	}
}

// poolShape fits the units' held-out block maxima with one GEV shape
// (alerts.calibration_shape: shared, pipeline.RatioRecorder.PoolShape)
// and returns a line for the summary: the common shape, each unit's own
// and the likelihood-ratio test of their difference.
func poolShape(rec *pipeline.RatioRecorder, cfg *configs.Config, model *pipeline.ModelFile) []string {
	var pu []pipeline.PoolUnit
	for _, u := range model.Units {
		pu = append(pu, pipeline.PoolUnit{Name: u.Name, Budget: budgetFor(cfg, u.Name),
			Rule: pipeline.AlarmRuleAt(cfg, u.Name, time.Duration(model.Period))})
	}
	perStat := func(n string) bool { p := cfg.AlertsFor(n).BudgetPerStatistic; return p != nil && *p }
	points := func(n string) bool { _, ok := pipeline.CalibratesPoints(cfg, n); return ok }
	sh, err := rec.PoolShape(pu, perStat, points)
	switch {
	case err != nil:
		return []string{fmt.Sprintf("alerts.calibration_shape: no shape common to the units (each unit its own): %v", err)}
	case len(sh.Units) < 2:
		return nil
	}
	var parts []string
	for i, n := range sh.Units {
		parts = append(parts, fmt.Sprintf("%s %.2f", n, sh.Own[i]))
	}
	own := strings.Join(parts, ", ")
	differ := ""
	if sh.P < 0.05 {
		differ = "; they differ more than chance would over the held-out days, shared anyway (README, Validation, One tail shape for the plant's units)"
	}
	return []string{fmt.Sprintf("alerts.calibration_shape: %d units share the tail shape ξ = %.3f of their held-out block maxima (own ξ̂: %s; likelihood ratio %.2f, p = %.3f%s)",
		len(sh.Units), sh.Xi, own, sh.LR, sh.P, differ)}
}
