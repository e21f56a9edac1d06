package cli

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
)

func init() {
	register(command{name: "fit", args: "--input FILE... --out MODEL", summary: "learn a baseline model from a log of normal operation", run: runFit})
}

const fitHelp = `
Learn a baseline model from recorded line protocol of normal operation:
per unit, the mean and spread of every channel, their correlation, the
sparse modes and the control limits. Every frame weighs the same unless
--halflife is given. The model file (JSON, versioned) is read by
"replay --model" and by the service (model.file in the configuration).

A fitted unit keeps the settings it was fitted with (sparsity, modes,
half-life, alpha); to change them, fit again. Channels are auto-discovered
and the frame period inferred unless the configuration or flags say
otherwise. Input "-" is standard input.

With alerts.budget (default 0.25: one false alert per unit every four days) each
unit's limits are calibrated: a model learned on the first half of the
log scores the second half (alerts.calibration_folds K: each of K blocks
of the log is scored by a model learned on the others), the whole alarm
rule's statistic (with alerts.calibrate_points, without the excursions of
T² alone, spread over the channels, that alerts.new_point records as
notices) is fitted by an extreme-value model of block maxima (its
shape common to the units, each with its own location and scale; with
alerts.calibration_shape: own, each unit's own shape), and every limit
is multiplied by the scale at which the expected false alerts per day
meet the budget.
fit prints the scale, the limits, the expected rate with its 95 %
interval, and the days of normal log needed when the log is too short.
The budget wins over alpha, which then only sets the base limits. Input
from standard input cannot be calibrated (it is read once).`

func runFit(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "fit", "--input FILE... --out MODEL [--json]", fitHelp)
	var mf modelFlags
	mf.register(fs, true)
	var inputs listFlag
	var outPath string
	var asJSON bool
	var out runOutputs
	fs.Var(&inputs, "input", "line-protocol `FILE` of normal operation (repeatable; also as arguments; - is stdin)")
	fs.StringVar(&outPath, "out", "", "write the model to `MODEL` (required)")
	fs.BoolVar(&asJSON, "json", false, "print the learned modes and limits as JSON on standard output")
	out.register(fs)
	if err := parseInputs(fs, args, &inputs); err != nil {
		return err
	}
	if outPath == "" {
		return usagef("--out MODEL is required")
	}
	cfg, err := mf.load(fs)
	if err != nil {
		return err
	}
	if mf.set["limits"] || mf.set["adapt"] {
		return usagef("--limits and --adapt apply to replay and run, not to fit")
	}
	out.progress = "fit"
	res, _, err := runEngine(ctx, env, cfg, inputs, nil, true, mf.halfLifeSet(), out)
	if res == nil {
		return err
	}
	if err != nil {
		return fmt.Errorf("%w (no model written)", err)
	}
	n, _, _ := res.Pipeline.Frames()
	if n == 0 {
		st := res.Intake.Stats()
		return fmt.Errorf("%w: %d lines read, %d rejected; no model written", pipeline.ErrNoData, st.Lines, st.Rejected())
	}
	model, berr := res.Pipeline.Baseline()
	if len(model.Units) == 0 {
		return fmt.Errorf("no unit could be fitted: %w", berr)
	}
	if berr != nil {
		fmt.Fprintf(env.Err, "modewatch fit: some units were left out: %v\n", berr)
	}
	budgetNotes := calibrateBudgets(ctx, env, cfg, inputs, mf, model)
	if err := pipeline.WriteModel(outPath, model); err != nil {
		return err
	}
	if asJSON {
		type unitOut struct {
			Name     string                 `json:"name"`
			Channels []string               `json:"channels"`
			Settings pipeline.ModelSettings `json:"settings"`
			Modes    []pipeline.ModeView    `json:"modes"`
			Limits   pipeline.LimitsView    `json:"limits"`
			// States: the operating states (units[].state), each with its
			// modes; Suggested: context candidates (units[].context).
			States    []stateOut                   `json:"states,omitempty"`
			HoldOff   *int                         `json:"state_hold_off_frames,omitempty"`
			Suggested []pipeline.ContextSuggestion `json:"context_suggested,omitempty"`
			// Calibration: alerts.budget's calibration (absent: off or failed).
			Calibration *pipeline.Calibration `json:"calibration,omitempty"`
		}
		o := struct {
			Model  string    `json:"model"`
			Frames uint64    `json:"frames"`
			Period string    `json:"period"`
			Units  []unitOut `json:"units"`
		}{Model: outPath, Frames: model.Frames, Period: res.Period.String()}
		for _, u := range model.Units {
			uo := unitOut{Name: u.Name, Channels: u.Channels, Settings: u.Settings, Modes: u.Modes, Limits: u.Limits, Suggested: u.Suggested,
				Calibration: u.Calibration}
			if u.States != nil {
				h := u.States.HoldOff
				uo.HoldOff = &h
				for _, s := range u.States.Models {
					uo.States = append(uo.States, stateOut{Label: s.Label, Frames: s.Frames, Modes: s.Modes, Limits: s.Limits})
				}
			}
			o.Units = append(o.Units, uo)
		}
		enc := json.NewEncoder(env.Out)
		enc.SetIndent("", "  ")
		return enc.Encode(o)
	}
	// The summary is the command's output; --quiet only silences standard error.
	fmt.Fprintf(env.Out, "fitted %d unit(s) on %d frames of %s (%s to %s); model written to %s\n", len(model.Units), model.Frames,
		res.Period, model.From.Format("2006-01-02T15:04:05Z07:00"), model.To.Format("2006-01-02T15:04:05Z07:00"), outPath)
	for _, u := range model.Units {
		lim := ""
		if u.Limits.T2 != nil && u.Limits.SPE != nil {
			lim = fmt.Sprintf(", T² limit %.2f, SPE limit %.2f at α=%g", *u.Limits.T2, *u.Limits.SPE, u.Limits.Alpha)
		}
		fmt.Fprintf(env.Out, "unit %-12s %3d channels, %d modes, %d residual dimensions%s\n", u.Name, len(u.Channels), len(u.Modes), u.Limits.ResidualDims, lim)
		if u.States == nil {
			printModes(env.Out, u.Name, "  ", u.Modes)
		} else {
			fmt.Fprintf(env.Out, "  %d operating states by %s (hold-off after a switch: %d frames)\n",
				len(u.States.Models), u.States.Channel, u.States.HoldOff)
			for _, s := range u.States.Models {
				fmt.Fprintf(env.Out, "  state %s: %d frames, %d modes\n", s.Label, s.Frames, len(s.Modes))
				printModes(env.Out, u.Name, "    ", s.Modes)
			}
		}
		printSpikes(env.Out, u.Name, "  ", u.Quality)
		printLevels(env.Out, u.Name, "  ", u.Quality)
		for _, s := range u.Suggested {
			fmt.Fprintf(env.Out, "  context suggestion: %s (unit %s) explains %.0f%% of this unit's variance; list it in units[].context if it drives this unit\n",
				s.Channel, s.Unit, 100*s.Share)
		}
		printCalibration(env, u)
	}
	for _, n := range budgetNotes {
		fmt.Fprintln(env.Out, n)
	}
	return nil
}

// stateOut is one operating state in fit's JSON output.
type stateOut struct {
	Label  string              `json:"label"`
	Frames uint64              `json:"frames"`
	Modes  []pipeline.ModeView `json:"modes"`
	Limits pipeline.LimitsView `json:"limits"`
}

// printModes prints modes, one line each, channel names without the unit.
func printModes(w io.Writer, unit, indent string, modes []pipeline.ModeView) {
	for _, m := range modes {
		parts := make([]string, len(m.Channels))
		for i, c := range m.Channels {
			parts[i] = fmt.Sprintf("%s %+.2f", strings.TrimPrefix(c, unit+"."), m.Loadings[i])
		}
		fmt.Fprintf(w, "%smode %d (%4.1f%%): %s\n", indent, m.ID, 100*m.VarianceShare, strings.Join(parts, ", "))
	}
}

// printLevels prints on one line the normal level steps the unit's
// normal log taught (alerts.ChannelProfile.LevelStepMax: per channel the
// largest step of its residual given the others between two adjacent
// windows, in standard deviations of that residual) and the level each
// alerts at (alerts.LevelShiftFactor times it); then the channels without
// a level-shift rule (discrete, or no steps learned). Nothing is printed
// for a unit without profiles or without any level learned.
func printLevels(w io.Writer, unit, indent string, profiles []alerts.ChannelProfile) {
	var with, without []string
	for _, p := range profiles {
		name := strings.TrimPrefix(p.Channel, unit+".")
		if p.LevelStepMax > 0 {
			with = append(with, fmt.Sprintf("%s %.3g", name, p.LevelStepMax))
		} else {
			without = append(without, name)
		}
	}
	if len(with) == 0 {
		return
	}
	line := fmt.Sprintf("%slevel steps (largest of the normal log's later half, σ of each channel's residual given the others; a shift beyond %g times): %s",
		indent, alerts.LevelShiftFactor, strings.Join(with, ", "))
	if len(without) > 0 {
		line += "; no level-shift rule: " + strings.Join(without, ", ")
	}
	fmt.Fprintln(w, line)
}

// printSpikes prints the spike sizes the unit's normal log taught (see
// alerts.SpikeLearner) on one line: per channel, the least departure from
// both neighbours that makes a reading a spike, in the channel's unit, and
// the most spikes the log had within alerts.SpikeSpan; then the channels
// without a spike rule (log too short, never changed, or spiky by nature).
// Nothing is printed for a unit without profiles.
func printSpikes(w io.Writer, unit, indent string, profiles []alerts.ChannelProfile) {
	var with, without []string
	for _, p := range profiles {
		name := strings.TrimPrefix(p.Channel, unit+".")
		if p.SpikeSize > 0 {
			with = append(with, fmt.Sprintf("%s %.4g (%d)", name, p.SpikeSize, p.SpikeMax))
		} else {
			without = append(without, name)
		}
	}
	if len(with)+len(without) == 0 {
		return
	}
	line := fmt.Sprintf("%sspike sizes (most spikes of the normal log within %s): %s", indent, alerts.SpikeSpan, strings.Join(with, ", "))
	if len(with) == 0 {
		line += "none"
	}
	if len(without) > 0 {
		line += "; no spike rule: " + strings.Join(without, ", ")
	}
	fmt.Fprintln(w, line)
}
