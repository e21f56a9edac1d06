package cli

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/configs"
	"modewatch/stream"
)

// empiricalLimits checks the --limits settings of replay and returns the
// Prepare hook that sets empirical limits, or nil when every unit uses the
// theoretical ones.
//
// Empirical limits (--limits empirical:FILE) are the (1 − α) quantiles of
// T², SPE and φ over a reference log of normal operation, scored by the
// fitted model without learning (tracker.Calibrate; the 10th-largest of
// 960 values at α = 0.01, as in the published Tennessee Eastman tables,
// Russell, Chiang & Braatz 2000). They hold only for a model that does not
// change, so they need a fitted model (--model) held fixed (--adapt=false).
// The reference log is read whole into memory (frames × channels of the
// calibrated units).
func empiricalLimits(cfg *configs.Config, baseline *pipeline.ModelFile) (func(*pipeline.Pipeline) error, error) {
	files := map[string][]string{} // reference file → units
	check := func(unit string, m configs.Model) error {
		if m.Limits.Method != configs.LimitsEmpirical {
			return nil
		}
		if baseline == nil {
			return usagef("--limits %s needs a fitted model (--model MODEL): empirical limits are quantiles of a fixed model's statistics over the reference log", m.Limits)
		}
		if m.Adapt == nil || *m.Adapt {
			return usagef("--limits %s needs --adapt=false: a model that goes on learning replaces the limits at its next refresh", m.Limits)
		}
		if unit != "" {
			files[m.Limits.File] = append(files[m.Limits.File], unit)
		}
		return nil
	}
	if err := check("", cfg.Model.Over(configs.DefaultModel())); err != nil {
		return nil, err
	}
	for i := range cfg.Units {
		if err := check("", cfg.UnitModel(i)); err != nil {
			return nil, err
		}
	}
	if baseline == nil {
		return nil, nil
	}
	for _, u := range baseline.Units {
		if err := check(u.Name, cfg.ModelFor(u.Name)); err != nil {
			return nil, err
		}
	}
	if len(files) == 0 {
		return nil, nil
	}
	return func(p *pipeline.Pipeline) error {
		names := make([]string, 0, len(files))
		for f := range files {
			names = append(names, f)
		}
		sort.Strings(names)
		for _, f := range names {
			if err := calibrate(p, cfg, time.Duration(baseline.Period), f, files[f]); err != nil {
				return err
			}
		}
		return nil
	}, nil
}

// calibrate reads the reference log file, collects each unit's frames (in
// the unit's channel order, NaN where missing) and sets the unit's limits
// from them.
func calibrate(p *pipeline.Pipeline, cfg *configs.Config, period time.Duration, file string, units []string) error {
	type target struct {
		unit  *pipeline.Unit
		names []string
		idx   []int // registry index of each channel, -1 until seen
		rows  [][]float64
	}
	var ts []*target
	for _, name := range units {
		u := p.Unit(name)
		if u == nil || u.Tracker() == nil {
			return fmt.Errorf("empirical limits: unit %s has no fitted model", name)
		}
		if u.Lags() > 0 {
			return fmt.Errorf("empirical limits: unit %s: not available for a model with lagged copies (model.lags %d)", u.Name, u.Lags())
		}
		t := &target{unit: u, names: u.Channels()}
		t.idx = make([]int, len(t.names))
		for k := range t.idx {
			t.idx[k] = -1
		}
		ts = append(ts, t)
	}
	chans, err := stream.NewChannels(pipeline.ChannelSpecs(cfg), cfg.Frames.MaxChannels)
	if err != nil {
		return fmt.Errorf("empirical limits: channel map: %w", err)
	}
	prec, err := pipeline.Precision(cfg.Frames.Precision)
	if err != nil {
		return err
	}
	known := 0
	var lineErrs []error
	in, err := stream.NewIntake(chans, stream.Options{
		Align: pipeline.AlignConfig(cfg.Frames, period), Precision: prec,
		OnError: func(err error) {
			if len(lineErrs) < 5 {
				lineErrs = append(lineErrs, err)
			}
		},
	}, func(f *stream.Frame) error {
		if n := chans.Len(); n != known {
			known = n
			for _, t := range ts {
				for k, name := range t.names {
					if t.idx[k] < 0 {
						if i, ok := chans.Index(name); ok {
							t.idx[k] = i
						}
					}
				}
			}
		}
		for _, t := range ts {
			row := make([]float64, len(t.names))
			if f.Gather(row, nil, nil, t.idx) > 0 {
				t.rows = append(t.rows, row)
			}
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("empirical limits: %w", err)
	}
	err = in.ReadFiles(context.Background(), file)
	if ferr := in.Flush(); err == nil {
		err = ferr
	}
	if err != nil {
		return fmt.Errorf("empirical limits: reference log: %w", err)
	}
	if st := in.Stats(); st.Rejected() > 0 {
		return fmt.Errorf("empirical limits: reference log %s: %d bad line(s), first: %w", file, st.Rejected(), errors.Join(lineErrs...))
	}
	for _, t := range ts {
		if len(t.rows) == 0 {
			return fmt.Errorf("empirical limits: reference log %s has no frame with a channel of unit %s", file, t.unit.Name)
		}
		if err := t.unit.Tracker().Calibrate(t.rows); err != nil {
			return fmt.Errorf("empirical limits: unit %s over %s: %w", t.unit.Name, file, err)
		}
		t.unit.DropCalibration() // the empirical limits replace the budget's scale
	}
	return nil
}
