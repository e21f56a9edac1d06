// Package control answers operator commands (acknowledge, shelve,
// unshelve, maintenance) sent as NATS requests on a control subject.
//
// Request: one JSON command (alerts.Command), for example
//
//	{"op":"ack","alert_id":"coolwater/model/20261201T221318Z","by":"jo"}
//
// Reply: one JSON alerts.Reply, {"ok":true,"message":"acknowledged",…} or
// {"ok":false,"error":"…"}. The service's HTTP API calls the same handler.
package control

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/alerts"
)

// Handler applies a command; *alerts.Engine is one.
type Handler interface {
	Handle(ctx context.Context, c alerts.Command) alerts.Reply
}

// MaxRequest bounds a command's size in bytes.
const MaxRequest = 64 << 10

// Responder serves a control subject.
type Responder struct {
	byUser bool // the last subject token names the sender (ListenPerUser)
	nc     *nats.Conn
	sub    *nats.Subscription
	h      Handler
	log    *slog.Logger
	ctx    context.Context
	cancel context.CancelFunc
	once   sync.Once
	err    error
}

// Listen subscribes to subject (a queue group "modewatch-control" so that
// several instances share the load) and answers every request through h.
// log nil discards.
func Listen(nc *nats.Conn, subject string, h Handler, log *slog.Logger) (*Responder, error) {
	if nc == nil || h == nil {
		return nil, errors.New("control: nil connection or handler")
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	r := &Responder{nc: nc, h: h, log: log.With("subject", subject)}
	r.ctx, r.cancel = context.WithCancel(context.Background())
	sub, err := nc.QueueSubscribe(subject, "modewatch-control", r.serve)
	if err != nil {
		r.cancel()
		return nil, fmt.Errorf("control: subscribe %q: %w", subject, err)
	}
	r.sub = sub
	return r, nil
}

// ListenPerUser serves prefix.<user> for every user: the message server
// lets each user publish only on its own subject (see the service's NATS
// users), so the subject's last token is the authenticated sender, and it
// replaces the command's "by".
func ListenPerUser(nc *nats.Conn, prefix string, h Handler, log *slog.Logger) (*Responder, error) {
	r, err := Listen(nc, prefix+".*", h, log)
	if r != nil {
		r.byUser = true
	}
	return r, err
}

// parse decodes and validates the command of m; per user, the subject's
// user is its "by".
func (r *Responder) parse(m *nats.Msg) (alerts.Command, error) {
	if !r.byUser {
		return alerts.ParseCommand(m.Data)
	}
	c, err := alerts.DecodeCommand(m.Data)
	if err != nil {
		return c, err
	}
	c.By = m.Subject[strings.LastIndexByte(m.Subject, '.')+1:]
	return c, c.Validate()
}

func (r *Responder) serve(m *nats.Msg) {
	var rep alerts.Reply
	if len(m.Data) > MaxRequest {
		rep = alerts.Reply{Error: fmt.Sprintf("control: command of %d bytes exceeds %d", len(m.Data), MaxRequest)}
	} else if c, err := r.parse(m); err != nil {
		rep = alerts.Reply{Error: err.Error()}
		r.log.Warn("control: bad command", "err", err)
	} else {
		rep = r.h.Handle(r.ctx, c)
	}
	if m.Reply == "" {
		r.log.Warn("control: command without a reply subject", "ok", rep.OK, "error", rep.Error)
		return
	}
	data, err := json.Marshal(rep)
	if err != nil {
		r.log.Error("control: encoding the reply", "err", err)
		return
	}
	if err := m.Respond(data); err != nil {
		r.log.Error("control: reply", "err", err)
	}
}

// Close drains the subscription (commands already received are answered)
// and waits until it is done or ctx ends. Idempotent.
func (r *Responder) Close(ctx context.Context) error {
	r.once.Do(func() {
		defer r.cancel()
		if err := r.sub.Drain(); err != nil && !errors.Is(err, nats.ErrConnectionClosed) {
			r.err = fmt.Errorf("control: drain: %w", err)
			return
		}
		for r.sub.IsValid() {
			select {
			case <-ctx.Done():
				r.err = fmt.Errorf("control: drain: %w", ctx.Err())
				return
			case <-time.After(5 * time.Millisecond): // nats.go has no per-subscription close notice
			}
		}
	})
	return r.err
}
