package sink

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync/atomic"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// NATS publishes each message to a subject with the header
// Nats-Msg-Id: <message id>, so a JetStream stream with a duplicate window
// stores a redelivered message once. With JetStream the publish waits for
// the stream's acknowledgement; without it, for a flush round trip to the
// server. The connection belongs to the caller.
type NATS struct {
	nc      *nats.Conn
	js      jetstream.JetStream
	subject func(unit string) string
	dups    atomic.Uint64
}

// NATSOptions configure a NATS deliverer.
type NATSOptions struct {
	// Subject is the subject to publish on; "{unit}" in it is replaced by
	// the message's unit as one subject token (see SubjectToken).
	Subject string
	// JetStream waits for a stream acknowledgement (a stream must bind the
	// subject); otherwise core NATS with a flush.
	JetStream bool
}

// NewNATS returns a deliverer publishing through nc.
func NewNATS(nc *nats.Conn, o NATSOptions) (*NATS, error) {
	if nc == nil {
		return nil, errors.New("sink: nats: nil connection")
	}
	probe := strings.ReplaceAll(o.Subject, "{unit}", "u")
	if probe == "" || strings.ContainsAny(probe, " \t\r\n*>") || strings.HasPrefix(probe, ".") || strings.HasSuffix(probe, ".") || strings.Contains(probe, "..") {
		return nil, fmt.Errorf("sink: nats: subject %q is not a valid publish subject", o.Subject)
	}
	n := &NATS{nc: nc}
	subj := o.Subject
	if strings.Contains(subj, "{unit}") {
		n.subject = func(u string) string { return strings.ReplaceAll(subj, "{unit}", SubjectToken(u)) }
	} else {
		n.subject = func(string) string { return subj }
	}
	if o.JetStream {
		js, err := jetstream.New(nc)
		if err != nil {
			return nil, fmt.Errorf("sink: nats: %w", err)
		}
		n.js = js
	}
	return n, nil
}

// SubjectToken maps a unit name to one subject token: characters that are
// not allowed or would split the token (space, '.', '*', '>') become '_'.
func SubjectToken(s string) string {
	if s == "" {
		return "_"
	}
	return strings.Map(func(r rune) rune {
		switch {
		case r == '.' || r == '*' || r == '>' || r <= ' ' || r == 0x7f:
			return '_'
		}
		return r
	}, s)
}

// Deliver publishes m.
func (n *NATS) Deliver(ctx context.Context, m Message) error {
	msg := nats.NewMsg(n.subject(m.Unit))
	msg.Header.Set(nats.MsgIdHdr, m.ID)
	msg.Header.Set("Content-Type", "application/json")
	msg.Data = m.Data
	if n.js != nil {
		ack, err := n.js.PublishMsg(ctx, msg)
		if err != nil {
			return fmt.Errorf("sink: nats: publish %s: %w", msg.Subject, err)
		}
		if ack.Duplicate {
			n.dups.Add(1)
		}
		return nil
	}
	if err := n.nc.PublishMsg(msg); err != nil {
		return fmt.Errorf("sink: nats: publish %s: %w", msg.Subject, err)
	}
	if err := n.nc.FlushWithContext(ctx); err != nil {
		return fmt.Errorf("sink: nats: flush: %w", err)
	}
	return nil
}

// Duplicates counts publishes the stream acknowledged as duplicates.
func (n *NATS) Duplicates() uint64 { return n.dups.Load() }

// Close does nothing: the connection belongs to the caller.
func (n *NATS) Close() error { return nil }
