package configs

import (
	"fmt"
	"time"
)

// Defaults of the readings intake.
const (
	// DefaultStreamMaxAge and DefaultStreamMaxBytes limit the readings
	// stream the service creates: a week of readings, at most 1 GiB.
	DefaultStreamMaxAge         = 7 * 24 * time.Hour
	DefaultStreamMaxBytes int64 = 1 << 30
	// DefaultStallExit is how long readings may go unconsumed before the
	// service exits with status 1 for its supervisor to restart it.
	DefaultStallExit = 10 * time.Minute
)

// StallExit is a duration, or "off" (Off true).
type StallExit struct {
	After time.Duration
	Off   bool
}

// UnmarshalText reads "off" or a duration.
func (s *StallExit) UnmarshalText(b []byte) error {
	if string(b) == "off" {
		*s = StallExit{Off: true}
		return nil
	}
	d, err := ParseDuration(string(b))
	if err != nil {
		return fmt.Errorf("%q: want a duration (e.g. 10m) or off", b)
	}
	*s = StallExit{After: d}
	return nil
}

// MarshalText writes "off" or the duration.
func (s StallExit) MarshalText() ([]byte, error) {
	if s.Off {
		return []byte("off"), nil
	}
	return []byte(s.After.String()), nil
}

func (c *Config) applyIntakeDefaults() {
	js := &c.Intake.JetStream
	if js.MaxAge == 0 {
		js.MaxAge = DefaultStreamMaxAge
	}
	if js.MaxBytes == 0 {
		js.MaxBytes = DefaultStreamMaxBytes
	}
	if !c.Intake.StallExit.Off && c.Intake.StallExit.After == 0 {
		c.Intake.StallExit.After = DefaultStallExit
	}
}

func (c *Config) validateIntakeLimits(v *validator) {
	js := c.Intake.JetStream
	if js.MaxAge < 0 || (js.MaxAge > 0 && js.MaxAge < time.Minute) {
		v.add("intake.jetstream.max_age", "%v is too short (at least 1m)", js.MaxAge)
	}
	if js.MaxBytes < 0 || (js.MaxBytes > 0 && js.MaxBytes < 1<<20) {
		v.add("intake.jetstream.max_bytes", "%d is too small (at least 1 MiB)", js.MaxBytes)
	}
	if se := c.Intake.StallExit; !se.Off && (se.After < 0 || (se.After > 0 && se.After < 10*time.Second)) {
		v.add("intake.stall_exit", "%v is too short (at least 10s, or off)", se.After)
	}
}
