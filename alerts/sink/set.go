package sink

import (
	"context"
	"encoding/json"
	"errors"
	"log/slog"
	"strconv"
	"sync"

	"modewatch/alerts"
)

// Set fans alert records out to several sinks. It implements
// alerts.Publisher: Publish encodes the record once and submits it to every
// sink without blocking.
type Set struct {
	sinks []*Sink
	log   *slog.Logger
}

// NewSet returns a set over sinks; log nil discards.
func NewSet(log *slog.Logger, sinks ...*Sink) *Set {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &Set{sinks: sinks, log: log}
}

// MessageOf returns the message of one record revision: id
// "<record id>#<revision>", the unit, and the JSON.
func MessageOf(r *alerts.Record) (Message, error) {
	data, err := json.Marshal(r)
	if err != nil {
		return Message{}, err
	}
	return Message{ID: r.ID + "#" + strconv.Itoa(r.Revision), Unit: r.Unit, Data: data}, nil
}

// Publish submits r to every sink; failures are logged and counted by the
// sinks.
func (s *Set) Publish(r *alerts.Record) {
	m, err := MessageOf(r)
	if err != nil {
		s.log.Error("sink: encoding a record", "id", r.ID, "err", err)
		return
	}
	for _, k := range s.sinks {
		if err := k.Submit(m); err != nil {
			s.log.Error("sink: record not kept", "sink", k.Name(), "id", m.ID, "err", err)
		}
	}
}

// Sinks returns the sinks, for their Stats.
func (s *Set) Sinks() []*Sink { return s.sinks }

// Close closes every sink concurrently under ctx.
func (s *Set) Close(ctx context.Context) error {
	defer func() {
		if n := s.Waiting(); n > 0 {
			s.log.Warn("sinks closed; undelivered records wait in the spools for the next start", "records", n)
		}
	}()
	errs := make([]error, len(s.sinks))
	var wg sync.WaitGroup
	for i, k := range s.sinks {
		wg.Go(func() { errs[i] = k.Close(ctx) })
	}
	wg.Wait()
	return errors.Join(errs...)
}

// Waiting returns, after Close, how many undelivered records wait in the
// sinks' spools, all sinks together.
func (s *Set) Waiting() int {
	n := 0
	for _, k := range s.sinks {
		n += k.Waiting()
	}
	return n
}
