package alerts

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"strings"
	"time"
)

// Command operations.
const (
	OpAck         = "ack"         // acknowledge an alert: alert_id, by
	OpShelve      = "shelve"      // shelve an alert's alarm group: alert_id, until or for, by, reason
	OpUnshelve    = "unshelve"    // end a shelf early: alert_id, by
	OpMaintenance = "maintenance" // unit, on, by
	OpAccept      = "accept"      // accept a model incident (alert_id) or every one of a unit (unit) as the new normal: by, comment
)

// ErrCommand marks an invalid command.
var ErrCommand = errors.New("alerts: invalid command")

// Duration is a time.Duration that reads and writes JSON (and any text
// encoding) as a Go duration string: it writes "1h30m0s" and reads anything
// time.ParseDuration accepts ("90m", "2h"). Commands and model files use it.
type Duration time.Duration

// MarshalText writes d as a Go duration string.
func (d Duration) MarshalText() ([]byte, error) { return []byte(time.Duration(d).String()), nil }

// UnmarshalText reads a Go duration string.
func (d *Duration) UnmarshalText(b []byte) error {
	v, err := time.ParseDuration(string(b))
	if err != nil {
		return err
	}
	*d = Duration(v)
	return nil
}

// Command is an operator command. JSON form:
//
//	{"op":"ack","alert_id":"...","by":"jo","comment":"seen"}
//	{"op":"shelve","alert_id":"...","for":"2h","by":"jo","reason":"sensor work"}
//	{"op":"shelve","alert_id":"...","until":"2026-12-01T18:00:00Z","by":"jo","reason":"..."}
//	{"op":"unshelve","alert_id":"...","by":"jo"}
//	{"op":"maintenance","unit":"coolwater","on":true,"by":"jo","reason":"pump swap"}
//	{"op":"accept","alert_id":"...","by":"jo","comment":"new feed grade"}
//	{"op":"accept","unit":"coolwater","by":"jo","comment":"setpoint moved"}
//
// A shelf's Until is compared with frame time; For counts from the unit's
// latest frame time.
type Command struct {
	Op      string    `json:"op"`
	AlertID string    `json:"alert_id,omitempty"`
	Unit    string    `json:"unit,omitempty"`
	Until   time.Time `json:"until,omitzero"`
	For     Duration  `json:"for,omitempty"`
	On      *bool     `json:"on,omitempty"`
	By      string    `json:"by"`
	Reason  string    `json:"reason,omitempty"`
	Comment string    `json:"comment,omitempty"`
}

// Reply answers a command.
type Reply struct {
	OK      bool   `json:"ok"`
	Error   string `json:"error,omitempty"`
	Message string `json:"message,omitempty"`
	AlertID string `json:"alert_id,omitempty"`
	Unit    string `json:"unit,omitempty"`
}

// maxText bounds free-text fields of commands.
const maxText = 512

// ParseCommand decodes and validates one JSON command. Unknown fields are
// errors; errors name the field or byte offset.
func ParseCommand(data []byte) (Command, error) {
	c, err := DecodeCommand(data)
	if err != nil {
		return c, err
	}
	return c, c.Validate()
}

// DecodeCommand decodes one JSON command without validating it (for a
// caller that sets fields first, e.g. the authenticated "by").
func DecodeCommand(data []byte) (Command, error) {
	var c Command
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&c); err != nil {
		var se *json.SyntaxError
		var te *json.UnmarshalTypeError
		switch {
		case errors.As(err, &se):
			return c, fmt.Errorf("%w: offset %d: %w", ErrCommand, se.Offset, err)
		case errors.As(err, &te):
			return c, fmt.Errorf("%w: field %q (offset %d): %w", ErrCommand, te.Field, te.Offset, err)
		case errors.Is(err, io.EOF):
			return c, fmt.Errorf("%w: empty", ErrCommand)
		}
		return c, fmt.Errorf("%w: %w", ErrCommand, err)
	}
	if dec.More() {
		return c, fmt.Errorf("%w: offset %d: data after the command", ErrCommand, dec.InputOffset())
	}
	return c, nil
}

// Validate checks the fields the operation needs; every problem is
// reported at once.
func (c Command) Validate() error {
	var errs []string
	need := func(ok bool, msg string) {
		if !ok {
			errs = append(errs, msg)
		}
	}
	need(strings.TrimSpace(c.By) != "", `field "by": who gives the command is required`)
	// In field order, so that the same command always gets the same reply.
	for _, f := range [...]struct{ name, v string }{{"by", c.By}, {"reason", c.Reason}, {"comment", c.Comment}, {"alert_id", c.AlertID}, {"unit", c.Unit}} {
		if len(f.v) > maxText {
			errs = append(errs, fmt.Sprintf("field %q: longer than %d bytes", f.name, maxText))
		}
	}
	switch c.Op {
	case OpAck, OpUnshelve:
		need(c.AlertID != "", `field "alert_id": required`)
	case OpShelve:
		need(c.AlertID != "", `field "alert_id": required`)
		need(c.Until.IsZero() != (c.For == 0), `fields "until"/"for": give exactly one`)
		need(c.For >= 0, `field "for": negative`)
		need(strings.TrimSpace(c.Reason) != "", `field "reason": required to shelve`)
	case OpMaintenance:
		need(c.Unit != "", `field "unit": required`)
		need(c.On != nil, `field "on": required (true or false)`)
	case OpAccept:
		need((c.AlertID == "") != (c.Unit == ""), `fields "alert_id"/"unit": give exactly one`)
	default:
		errs = append(errs, fmt.Sprintf(`field "op": %q is not one of ack, shelve, unshelve, maintenance, accept`, c.Op))
	}
	if len(errs) > 0 {
		return fmt.Errorf("%w: %s", ErrCommand, strings.Join(errs, "; "))
	}
	return nil
}

// Handle validates and applies one command and answers it. Every command
// is logged (info when applied, warn when refused). Safe for concurrent
// use; ctx is used for logging only.
func (e *Engine) Handle(ctx context.Context, c Command) Reply {
	rep := e.apply(c)
	attrs := []slog.Attr{slog.String("op", c.Op), slog.String("by", c.By)}
	if c.AlertID != "" {
		attrs = append(attrs, slog.String("alert", c.AlertID))
	}
	if c.Unit != "" {
		attrs = append(attrs, slog.String("unit", c.Unit))
	}
	if c.Reason != "" {
		attrs = append(attrs, slog.String("reason", c.Reason))
	}
	if rep.OK {
		e.log.LogAttrs(ctx, slog.LevelInfo, "alerts: command applied", append(attrs, slog.String("result", rep.Message))...)
	} else {
		e.log.LogAttrs(ctx, slog.LevelWarn, "alerts: command refused", append(attrs, slog.String("error", rep.Error))...)
	}
	return rep
}

func fail(c Command, format string, args ...any) Reply {
	return Reply{Error: fmt.Sprintf(format, args...), AlertID: c.AlertID, Unit: c.Unit}
}

func (e *Engine) apply(c Command) Reply {
	if err := c.Validate(); err != nil {
		return fail(c, "%v", err)
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if c.Op == OpMaintenance {
		return e.maintenance(c)
	}
	if c.Op == OpAccept && c.Unit != "" {
		return e.acceptUnit(c)
	}
	inc := e.byID[c.AlertID]
	if inc == nil {
		return fail(c, "alerts: unknown alert id %q (not open and not among the %d most recently closed)", c.AlertID, closedKept)
	}
	u := inc.u
	t := u.last
	ok := Reply{OK: true, AlertID: inc.id, Unit: u.name}
	switch c.Op {
	case OpAck:
		if inc.ack != nil {
			ok.Message = "already acknowledged by " + inc.ack.By
			return ok
		}
		inc.ack = &Ack{By: c.By, At: e.now().UTC(), Comment: c.Comment}
		e.emit(Event{Time: t, Unit: u.name, Kind: EventAck, AlertID: inc.id})
		e.publishAck(inc, t)
		ok.Message = "acknowledged"
		return ok
	case OpShelve:
		if inc.kind == KindFlood {
			return fail(c, "alerts: a flood alert cannot be shelved; shelve its members")
		}
		if u.maint {
			return fail(c, "alerts: unit %q is in maintenance", u.name)
		}
		until := c.Until
		if c.For > 0 {
			until = t.Add(time.Duration(c.For))
		}
		if !until.After(t) {
			return fail(c, "alerts: shelve until %s is not after the unit's latest frame %s", until.UTC().Format(time.RFC3339), t.UTC().Format(time.RFC3339))
		}
		if until.Sub(t) > e.cfg.MaxShelve {
			return fail(c, "alerts: shelve for %v exceeds the maximum %v", until.Sub(t), e.cfg.MaxShelve)
		}
		g := inc.g
		if g.qkind != "" {
			// Keep the quality alarm (and so its group) alive while shelved.
			if u.quality[qkey{g.qkind, g.chann}] == nil {
				return fail(c, "alerts: alarm of %q is gone", c.AlertID)
			}
		}
		g.shelf = &Shelve{Until: until.UTC(), By: c.By, Reason: c.Reason}
		e.emit(Event{Time: t, Unit: u.name, Kind: EventShelve, Alarm: g.key, AlertID: inc.id})
		if g.inc != nil {
			e.publishIf(g.inc, t, true)
		}
		ok.Message = "shelved until " + until.UTC().Format(time.RFC3339Nano)
		return ok
	case OpAccept:
		msg, accepted := e.acceptIncident(inc, c)
		if !accepted {
			return fail(c, "%s", msg)
		}
		e.syncMask(u, t)
		ok.Message = msg
		return ok
	case OpUnshelve:
		g := inc.g
		if g == nil || g.shelf == nil {
			ok.Message = "not shelved"
			return ok
		}
		g.shelf = nil
		e.emit(Event{Time: t, Unit: u.name, Kind: EventUnshelve, Alarm: g.key, AlertID: inc.id})
		if g.inc != nil {
			e.publish(g.inc, t)
		}
		ok.Message = "unshelved"
		return ok
	}
	return fail(c, "alerts: unhandled op %q", c.Op)
}

// publishAck publishes the revision carrying an acknowledgement; a closed
// incident already published gets one more revision.
func (e *Engine) publishAck(inc *incident, t time.Time) {
	if inc.ended && inc.rev == 0 {
		return // never shown: nothing to update
	}
	e.publish(inc, t)
}

func (e *Engine) maintenance(c Command) Reply {
	u := e.units[c.Unit]
	note := ""
	if u == nil {
		// A unit not seen yet can still be put in maintenance ahead of
		// time; the reply says so, in case the name is mistyped.
		u = e.unit(c.Unit)
		note = " (no frames seen from this unit yet)"
	}
	t := u.last
	if t.IsZero() {
		t = e.now()
	}
	on := *c.On
	ok := Reply{OK: true, Unit: u.name}
	if on == u.maint {
		ok.Message = fmt.Sprintf("maintenance already %v", map[bool]string{true: "on", false: "off"}[on])
		return ok
	}
	if on {
		u.maint = true
		e.emit(Event{Time: t, Unit: u.name, Kind: EventMaintenanceOn})
		for _, inc := range e.openIncidents(u) {
			e.closeIncident(inc, t, EndMaintenance)
		}
		if u.flood != nil {
			e.endFlood(u, t, t, EndMaintenance)
		}
		e.resetAlarms(u, t)
		e.syncFreeze(u, t)
		ok.Message = "maintenance on: alerts suppressed, learning frozen" + note
		return ok
	}
	u.maint = false
	e.resetAlarms(u, t)
	e.emit(Event{Time: t, Unit: u.name, Kind: EventMaintenanceOff})
	e.syncFreeze(u, t)
	ok.Message = "maintenance off" + note
	return ok
}

func (e *Engine) resetAlarms(u *unit, t time.Time) {
	for k := range u.stats {
		u.stats[k].Reset(t)
	}
	g := &u.modelG
	g.inAlarm, g.chattering, g.inc, g.shelf = false, false, nil, nil
	g.acts.reset()
	u.loc.extra = u.loc.extra[:0]
	u.loc.newLoc.Reset(t)
	u.loc.cover.clear()
	u.point.conc.Reset(t)
	u.point.learning = false
	u.clearQuality()
	u.openings.reset()
}
