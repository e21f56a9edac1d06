package sim

import (
	"context"
	"fmt"
	"math"
	"time"

	"github.com/nats-io/nats.go"
)

// LiveStats counts what Live published.
type LiveStats struct {
	Samples  int   // nominal sample instants sent
	Messages int   // NATS messages published (one per unit and sample)
	Bytes    int64 // payload bytes
}

// Subject returns the NATS subject Live publishes unit's readings to:
// prefix.readings.unit (readings.unit when prefix is empty).
func Subject(prefix, unit string) string {
	if prefix == "" {
		return "readings." + unit
	}
	return prefix + ".readings." + unit
}

// Live publishes the scenario's line protocol to NATS, one message per unit
// and sample on Subject(prefix, unit), each message holding that unit's lines
// (one per asset). Samples are paced against the wall clock: sample k is sent
// at t0 + k·Period/speed, t0 the call time; speed 1 is real time, speed 60
// sends an hour per minute, +Inf sends as fast as possible. Timestamps in the
// lines are the scenario's (use Rebase to start the scenario now).
//
// Live returns when the scenario ends (after flushing the connection, waiting
// at most 10 s for the server) or ctx
// is done (with ctx's error). The connection stays open and owned by the
// caller.
func (s *Scenario) Live(ctx context.Context, nc *nats.Conn, prefix string, speed float64) (LiveStats, error) {
	var st LiveStats
	if !(speed > 0) {
		return st, fmt.Errorf("sim: live speed must be > 0, got %v", speed)
	}
	g, err := s.NewGenerator()
	if err != nil {
		return st, err
	}
	subjects := make([]string, g.Units())
	for u := range subjects {
		subjects[u] = Subject(prefix, g.UnitName(u))
	}
	t0 := time.Now()
	timer := time.NewTimer(time.Hour)
	timer.Stop()
	defer timer.Stop()
	var buf []byte
	for g.Step() {
		if err := ctx.Err(); err != nil {
			return st, err
		}
		if !math.IsInf(speed, 1) {
			due := t0.Add(time.Duration(float64(g.Index()) * float64(s.Period) / speed))
			if wait := time.Until(due); wait > 0 {
				timer.Reset(wait)
				select {
				case <-ctx.Done():
					return st, ctx.Err()
				case <-timer.C:
				}
			}
		}
		for u, subj := range subjects {
			if buf, err = g.AppendUnit(buf[:0], u); err != nil {
				return st, err
			}
			if len(buf) == 0 {
				continue
			}
			if err := nc.Publish(subj, buf); err != nil {
				return st, fmt.Errorf("sim: publishing to %s: %w", subj, err)
			}
			st.Messages++
			st.Bytes += int64(len(buf))
		}
		st.Samples++
	}
	fctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if err := nc.FlushWithContext(fctx); err != nil {
		return st, fmt.Errorf("sim: flushing: %w", err)
	}
	return st, nil
}
