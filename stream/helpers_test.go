package stream

import (
	"errors"
	"io"
	"log/slog"
	"math"
	"slices"
	"testing"
	"time"
)

// frameCopy is a kept copy of an emitted frame.
type frameCopy struct {
	Start   time.Time
	Values  []float64
	Missing []bool
	Segment int
}

// sink collects frames and line errors.
type sink struct {
	frames []frameCopy
	errs   []*LineError
}

func (s *sink) handle(f *Frame) error {
	s.frames = append(s.frames, frameCopy{f.Start, slices.Clone(f.Values), slices.Clone(f.Missing), f.Segment})
	return nil
}

func (s *sink) onError(err error) {
	var le *LineError
	if !errors.As(err, &le) {
		panic("not a *LineError: " + err.Error())
	}
	s.errs = append(s.errs, le)
}

var quiet = slog.New(slog.NewTextHandler(io.Discard, nil))

// newTestIntake returns an intake with the given options (errors and frames
// going to the returned sink) over auto-discovery unless specs are given.
func newTestIntake(t testing.TB, opt Options, specs ...ChannelSpec) (*Intake, *sink) {
	t.Helper()
	return newTestIntakeCap(t, opt, 0, specs...)
}

// newTestIntakeCap is newTestIntake with an auto-discovery cap.
func newTestIntakeCap(t testing.TB, opt Options, maxAuto int, specs ...ChannelSpec) (*Intake, *sink) {
	t.Helper()
	ch, err := NewChannels(specs, maxAuto)
	if err != nil {
		t.Fatal(err)
	}
	s := &sink{}
	if opt.OnError == nil {
		opt.OnError = s.onError
	}
	if opt.Log == nil {
		opt.Log = quiet
	}
	in, err := NewIntake(ch, opt, s.handle)
	if err != nil {
		t.Fatal(err)
	}
	return in, s
}

// sameFloat reports whether a and b are equal or both NaN.
func sameFloat(a, b float64) bool {
	return a == b || (math.IsNaN(a) && math.IsNaN(b))
}

func ptr[T any](v T) *T { return &v }
