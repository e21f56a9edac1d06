package control

import (
	"context"
	"encoding/json"
	"strings"
	"sync"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/stream/natsource/natstest"
)

// TestResponder sends commands as NATS requests to a real embedded server
// and checks the replies and their effect on the engine's records.
func TestResponder(t *testing.T) {
	nc := natstest.Connect(t, natstest.Start(t)) // a real server in the test process
	var mu sync.Mutex
	var recs []*alerts.Record
	e, err := alerts.NewEngine(alerts.Config{Rules: alerts.Rules{OnCount: 1, OnWindow: 1}},
		alerts.PublisherFunc(func(r *alerts.Record) { mu.Lock(); recs = append(recs, r); mu.Unlock() }), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	if err := e.Observe(&alerts.Observation{Unit: "boiler", Time: t0, ModelState: alerts.ModelAdapting,
		Stats: []alerts.Stat{{Name: alerts.StatSPE, Value: 30, Limit: 10}}}); err != nil {
		t.Fatal(err)
	}
	id := recs[0].ID

	r, err := Listen(nc, "mw.control", e, nil)
	if err != nil {
		t.Fatal(err)
	}
	ask := func(req string) alerts.Reply {
		t.Helper()
		m, err := nc.Request("mw.control", []byte(req), 5*time.Second)
		if err != nil {
			t.Fatal(err)
		}
		var rep alerts.Reply
		if err := json.Unmarshal(m.Data, &rep); err != nil {
			t.Fatalf("reply %q: %v", m.Data, err)
		}
		return rep
	}
	cases := []struct {
		req     string
		ok      bool
		message string // substring of Message or Error
	}{
		{`{"op":"ack","alert_id":"` + id + `","by":"jo"}`, true, "acknowledged"},
		{`{"op":"ack","alert_id":"` + id + `","by":"al"}`, true, "already acknowledged by jo"},
		{`{"op":"ack","alert_id":"` + id + `"}`, false, `field "by"`},
		{`{"op":"ack","alert_id":"x/y/z","by":"jo"}`, false, "unknown alert id"},
		{`{"op":"shelve","alert_id":"` + id + `","by":"jo","for":"30m","reason":"valve work"}`, true, "shelved until 2026-03-02T08:30:00Z"},
		{`{"op":"shelve","alert_id":"` + id + `","by":"jo","for":"soon","reason":"r"}`, false, "invalid command"},
		{`{"op":"reboot","by":"jo"}`, false, `"reboot" is not one of`},
		{`{"op":"ack","by":"jo","alert_id":"a","extra":1}`, false, `unknown field "extra"`},
		{`{"op":`, false, "invalid command"},
		{`{"op":"maintenance","unit":"boiler","by":"jo"}`, false, `field "on"`},
		{`{"op":"maintenance","unit":"boiler","on":true,"by":"jo","reason":"burner swap"}`, true, "maintenance on"},
		{`{"op":"unshelve","alert_id":"` + id + `","by":"jo"}`, true, "not shelved"},
	}
	for _, c := range cases {
		rep := ask(c.req)
		text := rep.Message + rep.Error
		if rep.OK != c.ok || !strings.Contains(text, c.message) {
			t.Errorf("%s: ok %v %q, want ok %v containing %q", c.req, rep.OK, text, c.ok, c.message)
		}
	}
	mu.Lock()
	last := recs[len(recs)-1]
	mu.Unlock()
	if last.Acknowledged == nil || last.Acknowledged.By != "jo" || last.EndReason != alerts.EndMaintenance {
		t.Errorf("last record: %+v", last)
	}
	if err := r.Close(context.Background()); err != nil {
		t.Fatal(err)
	}
	if err := r.Close(context.Background()); err != nil {
		t.Errorf("second close: %v", err)
	}
	if _, err := nc.Request("mw.control", []byte(`{}`), 200*time.Millisecond); err == nil {
		t.Error("answered after Close")
	}
}
