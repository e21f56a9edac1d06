package service

import (
	"encoding/json"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nkeys"
	"golang.org/x/crypto/bcrypt"

	"modewatch/alerts"
	"modewatch/stream/natsource/natstest"
)

// TestEmbeddedServerUsers: the embedded server with three roles (a
// readings publisher with a password, an operator with an NKey, a viewer
// without control permission): a wrong password is refused; the viewer
// can neither shelve on its own control subject nor speak for the
// operator; the operator's shelve is applied with "by" its user name,
// whatever the command says.
func TestEmbeddedServerUsers(t *testing.T) {
	hash := func(pw string) string {
		h, err := bcrypt.GenerateFromPassword([]byte(pw), bcrypt.MinCost)
		if err != nil {
			t.Fatal(err)
		}
		return string(h)
	}
	op, err := nkeys.CreateUser()
	if err != nil {
		t.Fatal(err)
	}
	opPub, _ := op.PublicKey()
	opSeed, _ := op.Seed()
	cfg := serviceConfig(t, `server:
  embedded_port: -1
  users:
    - {name: gateway, password: "`+hash("gateway-secret")+`", publish: ["modewatch.readings.>"]}
    - {name: jo, nkey: `+opPub+`, operator: true, subscribe: ["modewatch.alerts.>"]}
    - {name: viewer, password: "`+hash("viewer-secret")+`", subscribe: ["modewatch.alerts.>"]}
http: {listen: "off"}`)
	svc := startService(t, Options{Config: cfg})
	url := svc.Info().NATS
	if _, err := nats.Connect(url); err == nil {
		t.Fatal("connected without credentials")
	}
	if _, err := nats.Connect(url, nats.UserInfo("gateway", "wrong")); err == nil || !strings.Contains(strings.ToLower(err.Error()), "authorization") {
		t.Fatalf("wrong password: %v, want an authorization violation", err)
	}
	connect := func(opts ...nats.Option) *nats.Conn {
		nc, err := nats.Connect(url, opts...)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(nc.Close)
		return nc
	}
	gateway := connect(nats.UserInfo("gateway", "gateway-secret"))
	id := openMissingAlert(t, svc, gateway)

	viewer := connect(nats.UserInfo("viewer", "viewer-secret"))
	shelve := func(by string) []byte {
		b, _ := json.Marshal(alerts.Command{Op: alerts.OpShelve, AlertID: id, For: alerts.Duration(time.Hour), By: by, Reason: "test"})
		return b
	}
	for _, subj := range []string{"modewatch.control.viewer", "modewatch.control.jo", "modewatch.control"} {
		if m, err := viewer.Request(subj, shelve("viewer"), time.Second); err == nil {
			t.Errorf("viewer's shelve on %s answered: %s", subj, m.Data)
		}
	}
	rec := func() alerts.Record {
		for _, r := range svc.Pipeline().Alerts().Open(nil) {
			if r.ID == id {
				return r
			}
		}
		t.Fatalf("alert %s closed", id)
		return alerts.Record{}
	}
	if r := rec(); r.Shelved != nil {
		t.Fatalf("shelved by a user without control permission: %+v", r.Shelved)
	}

	jo := connect(nats.Nkey(opPub, func(nonce []byte) ([]byte, error) {
		kp, err := nkeys.FromSeed(opSeed)
		if err != nil {
			return nil, err
		}
		return kp.Sign(nonce)
	}))
	m, err := jo.Request("modewatch.control.jo", shelve("mallory"), hangBound)
	if err != nil {
		t.Fatal(err)
	}
	var rep alerts.Reply
	if err := json.Unmarshal(m.Data, &rep); err != nil || !rep.OK {
		t.Fatalf("operator's shelve: %s %v", m.Data, err)
	}
	if r := rec(); r.Shelved == nil || r.Shelved.By != "jo" {
		t.Fatalf("shelved %+v, want by jo (the authenticated user)", r.Shelved)
	}
}

// TestControlPerUserExternal: with an external server and
// control_per_user, a command on <prefix>.control.<user> is recorded with
// that user as "by"; the plain control subject is not served.
func TestControlPerUserExternal(t *testing.T) {
	srv := natstest.Start(t)
	cfg := serviceConfig(t, `server: {urls: [`+srv.ClientURL()+`], control_per_user: true}
http: {listen: "off"}`)
	svc := startService(t, Options{Config: cfg})
	nc := natsClient(t, svc)
	id := openMissingAlert(t, svc, nc)
	b, _ := json.Marshal(alerts.Command{Op: alerts.OpAck, AlertID: id, By: "mallory"})
	if _, err := nc.Request("modewatch.control", b, 300*time.Millisecond); err == nil {
		t.Error("the plain control subject answered")
	}
	m, err := nc.Request("modewatch.control.kim", b, hangBound)
	if err != nil {
		t.Fatal(err)
	}
	var rep alerts.Reply
	if err := json.Unmarshal(m.Data, &rep); err != nil || !rep.OK {
		t.Fatalf("ack: %s %v", m.Data, err)
	}
	for _, r := range svc.Pipeline().Alerts().Open(nil) {
		if r.ID == id && (r.Acknowledged == nil || r.Acknowledged.By != "kim") {
			t.Errorf("acknowledged %+v, want by kim", r.Acknowledged)
		}
	}
}
