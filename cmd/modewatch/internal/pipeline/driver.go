package pipeline

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
)

// Precision converts the configured timestamp precision.
func Precision(s string) (lineprotocol.Precision, error) {
	switch s {
	case "", "ns":
		return lineprotocol.Nanosecond, nil
	case "us":
		return lineprotocol.Microsecond, nil
	case "ms":
		return lineprotocol.Millisecond, nil
	case "s":
		return lineprotocol.Second, nil
	}
	return 0, fmt.Errorf("pipeline: unknown timestamp precision %q", s)
}

// ChannelSpecs converts the configured channel map.
func ChannelSpecs(c *configs.Config) []stream.ChannelSpec {
	specs := make([]stream.ChannelSpec, len(c.Channels))
	for i, ch := range c.Channels {
		unit := ch.Unit
		name := c.ChannelName(i)
		if unit == "" {
			for _, u := range c.Units {
				for _, n := range u.Channels {
					if n == name {
						unit = u.Name
					}
				}
			}
		}
		specs[i] = stream.ChannelSpec{
			Name: ch.Name, Measurement: ch.Measurement, Tags: ch.Tags, Field: ch.Field,
			Display: ch.Display, EngUnit: ch.EngUnit, Min: ch.Min, Max: ch.Max, Model: ch.Model,
			BoolAsNumber: ch.BoolAsNumber, Unit: unit,
		}
	}
	return specs
}

// AlignConfig converts the frame settings for a known period.
func AlignConfig(f configs.Frames, period time.Duration) stream.AlignConfig {
	return stream.AlignConfig{Period: period, Staleness: f.Staleness, Lateness: f.Lateness, ClockJump: f.ClockJump}
}

// ReplayOptions configure Replay.
type ReplayOptions struct {
	Config *configs.Config
	// Inputs are line-protocol files (plain or gzip) read in order; "-"
	// is Stdin.
	Inputs []string
	Stdin  io.Reader
	// Baseline starts the units from a fitted model.
	Baseline *ModelFile
	// Fit weighs every frame equally unless FitHalfLife.
	Fit, FitHalfLife bool
	// OwnStateModes: see Options.OwnStateModes.
	OwnStateModes bool
	// Publisher receives alert records; nil discards them.
	Publisher alerts.Publisher
	// OnScore is called per unit and frame.
	OnScore func(u *Unit, t time.Time)
	// OnLineError receives every rejected line (a *stream.LineError).
	OnLineError func(error)
	Log         *slog.Logger
	// Prepare, if set, is called once the pipeline exists (units of the
	// baseline included) and before the first line is read; an error stops
	// the replay. replay uses it to set empirical control limits.
	Prepare func(p *Pipeline) error
	// ReadInput, if set, reads one input into the intake in place of
	// Intake.ReadFiles; the commands use it to count bytes for a progress
	// bar.
	ReadInput func(ctx context.Context, in *stream.Intake, name string) error
	// Keep selects frames by start time (see Options.Keep).
	Keep func(t time.Time) bool
}

// ReplayResult is what a replay or fit saw.
type ReplayResult struct {
	Pipeline *Pipeline
	Intake   *stream.Intake
	Period   time.Duration
	Inferred bool // the period was inferred from the data
	Elapsed  time.Duration
}

// ErrNoData reports input without a single usable line.
var ErrNoData = errors.New("pipeline: no usable line-protocol data in the input")

// Replay reads the inputs through decode → map → align and scores every
// frame. It returns the result even when the input ends in an error, so
// the caller can report what was processed.
func Replay(ctx context.Context, opt ReplayOptions) (*ReplayResult, error) {
	cfg, log := OrDefaults(opt.Config, opt.Log)
	prec, err := Precision(cfg.Frames.Precision)
	if err != nil {
		return nil, err
	}
	stdin := opt.Stdin
	if stdin == nil {
		stdin = os.Stdin
	}
	res := &ReplayResult{Period: cfg.Frames.Period}
	if res.Period == 0 && opt.Baseline != nil {
		res.Period = time.Duration(opt.Baseline.Period)
	}
	if res.Period == 0 && len(opt.Inputs) > 0 {
		p, in, err := inferPeriod(opt.Inputs[0], stdin, prec)
		if err != nil {
			return nil, err
		}
		res.Period, res.Inferred = p, true
		if in != nil {
			stdin = in
		}
		log.Info("frame period inferred from the data", "source", opt.Inputs[0], "period", p)
	}
	if res.Period <= 0 {
		return nil, errors.New("pipeline: frame period unknown: set frames.period or --period")
	}
	chans, err := stream.NewChannels(ChannelSpecs(cfg), cfg.Frames.MaxChannels)
	if err != nil {
		return nil, fmt.Errorf("pipeline: channel map: %w", err)
	}
	pl, err := New(Options{
		Config: cfg, Channels: chans, Period: res.Period, Publisher: opt.Publisher, OnScore: opt.OnScore,
		Baseline: opt.Baseline, Fit: opt.Fit, FitHalfLife: opt.FitHalfLife, OwnStateModes: opt.OwnStateModes, Log: log, Keep: opt.Keep,
	})
	if err != nil {
		return nil, err
	}
	res.Pipeline = pl
	in, err := stream.NewIntake(chans, stream.Options{
		Align: AlignConfig(cfg.Frames, res.Period), Precision: prec, OnError: opt.OnLineError,
		Log: log, Stdin: stdin, OnClockJump: pl.ClockJump,
	}, pl.Frame)
	if err != nil {
		return nil, fmt.Errorf("pipeline: %w", err)
	}
	res.Intake = in
	if opt.Prepare != nil {
		if err := opt.Prepare(pl); err != nil {
			return nil, err
		}
	}
	start := time.Now()
	if opt.ReadInput != nil {
		for _, name := range opt.Inputs {
			if err = opt.ReadInput(ctx, in, name); err != nil {
				break
			}
		}
	} else {
		err = in.ReadFiles(ctx, opt.Inputs...)
	}
	if ferr := in.Flush(); err == nil {
		err = ferr
	}
	res.Elapsed = time.Since(start)
	return res, err
}

// inferPeriod estimates the frame period from the start of the first
// input. For standard input it returns a reader that still holds the
// bytes it looked at.
func inferPeriod(name string, stdin io.Reader, prec lineprotocol.Precision) (time.Duration, io.Reader, error) {
	var r io.Reader
	var keep *bufio.Reader
	if name == "-" {
		keep = bufio.NewReaderSize(stdin, stream.InferPrefixBytes)
		r = keep
	} else {
		f, err := os.Open(name)
		if err != nil {
			return 0, nil, fmt.Errorf("pipeline: %w", err)
		}
		defer f.Close()
		r = f
	}
	br, ok := r.(*bufio.Reader)
	if !ok {
		br = bufio.NewReaderSize(r, 64<<10)
	}
	if magic, _ := br.Peek(2); len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		if keep != nil {
			// Gzip on stdin: decompress a copy of what is buffered.
			head, _ := br.Peek(stream.InferPrefixBytes)
			zr, err := gzip.NewReader(bytes.NewReader(head))
			if err != nil {
				return 0, nil, fmt.Errorf("pipeline: %s: %w", name, err)
			}
			br = bufio.NewReaderSize(zr, stream.InferPrefixBytes)
		} else {
			zr, err := gzip.NewReader(br)
			if err != nil {
				return 0, nil, fmt.Errorf("pipeline: %s: %w", name, err)
			}
			br = bufio.NewReaderSize(zr, stream.InferPrefixBytes)
		}
	} else if keep == nil {
		br = bufio.NewReaderSize(br, stream.InferPrefixBytes)
	}
	prefix, _ := br.Peek(stream.InferPrefixBytes)
	if len(prefix) == stream.InferPrefixBytes {
		if i := bytes.LastIndexByte(prefix, '\n'); i >= 0 {
			prefix = prefix[:i+1]
		}
	}
	if len(bytes.TrimSpace(prefix)) == 0 {
		return 0, nil, fmt.Errorf("%w: %s is empty", ErrNoData, name)
	}
	p, err := stream.InferPeriod(prefix, prec)
	if err != nil {
		return 0, nil, fmt.Errorf("pipeline: %s: %w (use --period or frames.period)", name, err)
	}
	p = RoundPeriod(p)
	if keep != nil {
		return p, keep, nil
	}
	return p, nil, nil
}

// RoundPeriod rounds an inferred frame period to three significant digits
// (19.9998 s → 20 s): timestamps carry jitter, and frames on a round grid
// are easier to read and line up with other tools.
func RoundPeriod(p time.Duration) time.Duration {
	if p <= 0 {
		return p
	}
	unit := time.Duration(1)
	for p/unit >= 1000 {
		unit *= 10
	}
	return (p + unit/2) / unit * unit
}
