package configs

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// ModeCount is the number of modes: a fixed Count, or (Count == 0) the
// smallest number whose adjusted variance reaches Share of the total.
// Text form: "N" or "auto:SHARE" with SHARE in (0, 1].
type ModeCount struct {
	Count int
	Share float64
}

// IsZero reports whether m is unset.
func (m ModeCount) IsZero() bool { return m.Count == 0 && m.Share == 0 }

// String returns the text form, "N" or "auto:SHARE".
func (m ModeCount) String() string {
	if m.Count > 0 {
		return strconv.Itoa(m.Count)
	}
	if m.Share > 0 {
		return "auto:" + strconv.FormatFloat(m.Share, 'g', -1, 64)
	}
	return ""
}

// ParseModeCount parses "N" (N ≥ 1) or "auto:SHARE" (0 < SHARE ≤ 1).
func ParseModeCount(s string) (ModeCount, error) {
	s = strings.TrimSpace(s)
	if rest, ok := strings.CutPrefix(s, "auto:"); ok {
		v, err := strconv.ParseFloat(rest, 64)
		if err != nil || !(v > 0 && v <= 1) {
			return ModeCount{}, fmt.Errorf("modes %q: SHARE must be a number in (0, 1]", s)
		}
		return ModeCount{Share: v}, nil
	}
	n, err := strconv.Atoi(s)
	if err != nil || n < 1 {
		return ModeCount{}, fmt.Errorf("modes %q: want N (a whole number ≥ 1) or auto:SHARE", s)
	}
	return ModeCount{Count: n}, nil
}

// UnmarshalText implements encoding.TextUnmarshaler.
func (m *ModeCount) UnmarshalText(b []byte) error { return parseText(m, b, ParseModeCount) }

// MarshalText implements encoding.TextMarshaler.
func (m ModeCount) MarshalText() ([]byte, error) { return []byte(m.String()), nil }

// Limit methods.
const (
	// LimitsTheory sets T² from the F distribution and SPE from Box's
	// approximation g·χ²_h.
	LimitsTheory = "theory"
	// LimitsEmpirical sets each limit at the (1 − α) quantile of the
	// statistic over a reference log of normal operation (File).
	LimitsEmpirical = "empirical"
)

// Limits is how control limits are set: "theory" or "empirical:FILE".
type Limits struct {
	Method string // LimitsTheory or LimitsEmpirical
	File   string // reference log, for LimitsEmpirical
}

// String returns the text form.
func (l Limits) String() string {
	if l.Method == LimitsEmpirical {
		return LimitsEmpirical + ":" + l.File
	}
	return l.Method
}

// ParseLimits parses "theory" or "empirical:FILE".
func ParseLimits(s string) (Limits, error) {
	s = strings.TrimSpace(s)
	if s == LimitsTheory {
		return Limits{Method: LimitsTheory}, nil
	}
	if rest, ok := strings.CutPrefix(s, LimitsEmpirical+":"); ok {
		if rest == "" {
			return Limits{}, errors.New("limits \"empirical:\": FILE is missing")
		}
		return Limits{Method: LimitsEmpirical, File: rest}, nil
	}
	return Limits{}, fmt.Errorf("limits %q: want theory or empirical:FILE", s)
}

// UnmarshalText implements encoding.TextUnmarshaler.
func (l *Limits) UnmarshalText(b []byte) error { return parseText(l, b, ParseLimits) }

// parseText sets *dst to the value parse reads from the text b, for the
// UnmarshalText of a type with a text form; on an error *dst is left as
// it was.
func parseText[T any](dst *T, b []byte, parse func(string) (T, error)) error {
	v, err := parse(string(b))
	if err != nil {
		return err
	}
	*dst = v
	return nil
}

// MarshalText implements encoding.TextMarshaler.
func (l Limits) MarshalText() ([]byte, error) { return []byte(l.String()), nil }

// ParseDuration parses a Go duration ("90s", "1h30m") or a whole number of
// days ("7d"). Negative durations are errors.
func ParseDuration(s string) (time.Duration, error) {
	s = strings.TrimSpace(s)
	if rest, ok := strings.CutSuffix(s, "d"); ok {
		n, err := strconv.Atoi(rest)
		if err == nil {
			if n < 0 {
				return 0, fmt.Errorf("duration %q is negative", s)
			}
			return time.Duration(n) * 24 * time.Hour, nil
		}
	}
	d, err := time.ParseDuration(s)
	if err != nil {
		return 0, fmt.Errorf("duration %q: want e.g. 500ms, 15m, 1h30m or 7d", s)
	}
	if d < 0 {
		return 0, fmt.Errorf("duration %q is negative", s)
	}
	return d, nil
}
