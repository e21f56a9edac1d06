package service

import (
	"context"
	"crypto/ecdsa"
	"crypto/tls"
	"crypto/x509"
	"encoding/json"
	"io"
	"net"
	"net/http"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream/natsource/natstest"
)

// do sends one request with an optional bearer token and returns the
// status and the decoded JSON body.
func do(t *testing.T, c *http.Client, method, url, token, body string) (int, map[string]any) {
	t.Helper()
	req, err := http.NewRequest(method, url, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var v map[string]any
	b, _ := io.ReadAll(resp.Body)
	_ = json.Unmarshal(b, &v)
	return resp.StatusCode, v
}

// TestHTTPTokens: without a token each write endpoint answers 401, with a
// read-only token 403; a writer's command is applied and the record's
// "by" is the token's name, whatever the body says.
func TestHTTPTokens(t *testing.T) {
	reader, writer := testReader, testWriter
	svc, nc := startWithClient(t, Options{Config: tokenConfig(t)})
	id := openMissingAlert(t, svc, nc)
	base := svc.Info().HTTP
	c := http.DefaultClient

	writes := []struct{ method, path, body string }{
		{"POST", "/api/alerts/ack", `{"alert_id":"` + id + `","by":"mallory"}`},
		{"POST", "/api/alerts/shelve", `{"alert_id":"` + id + `","for":"1h","by":"mallory","reason":"x"}`},
		{"POST", "/api/alerts/unshelve", `{"alert_id":"` + id + `","by":"mallory"}`},
		{"POST", "/api/units/tk/maintenance", `{"on":true,"by":"mallory"}`},
		{"POST", "/api/commands", `{"op":"ack","alert_id":"` + id + `","by":"mallory"}`},
		{"PUT", "/api/units/tk/checkpoint", `{}`},
	}
	for _, w := range writes {
		if code, _ := do(t, c, w.method, base+w.path, "", w.body); code != http.StatusUnauthorized {
			t.Errorf("%s %s without a token: %d, want 401", w.method, w.path, code)
		}
		if code, _ := do(t, c, w.method, base+w.path, "wrong-token-0123456789", w.body); code != http.StatusUnauthorized {
			t.Errorf("%s %s with an unknown token: %d, want 401", w.method, w.path, code)
		}
		if code, _ := do(t, c, w.method, base+w.path, reader, w.body); code != http.StatusForbidden {
			t.Errorf("%s %s with a read token: %d, want 403", w.method, w.path, code)
		}
	}
	for _, path := range []string{"/api/units", "/api/alerts", "/metrics", "/api"} {
		if code, _ := do(t, c, "GET", base+path, "", ""); code != http.StatusUnauthorized {
			t.Errorf("GET %s without a token: %d, want 401", path, code)
		}
		if code, _ := do(t, c, "GET", base+path, reader, ""); code != http.StatusOK {
			t.Errorf("GET %s with a read token: %d, want 200", path, code)
		}
	}
	for _, path := range []string{"/healthz", "/readyz"} {
		if code, _ := do(t, c, "GET", base+path, "", ""); code != http.StatusOK {
			t.Errorf("GET %s without a token: %d, want 200 (probes)", path, code)
		}
	}
	if code, rep := do(t, c, "POST", base+"/api/alerts/ack", writer, `{"alert_id":"`+strings.Repeat("x", 70<<10)+`"}`); code != http.StatusRequestEntityTooLarge {
		t.Errorf("command body over 64 KiB: %d %v, want 413", code, rep)
	}
	req, _ := http.NewRequest("GET", base+"/metrics", nil)
	req.Header.Set("Authorization", "Bearer "+reader)
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	metrics, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, want := range []string{"modewatch_readings_consumed 1", `modewatch_unit_model_bytes{unit="tk"}`, `modewatch_unit_refused_channels_total{unit="tk"} 0`} {
		if !strings.Contains(string(metrics), want) {
			t.Errorf("/metrics lacks %q", want)
		}
	}
	if open := svc.Pipeline().Alerts().Open(nil); len(open) == 0 || open[0].Acknowledged != nil {
		t.Fatalf("a refused command changed the alert: %+v", open)
	}

	code, rep := do(t, c, "POST", base+"/api/alerts/ack", writer, writes[0].body)
	if code != http.StatusOK || rep["ok"] != true {
		t.Fatalf("ack with a write token: %d %v", code, rep)
	}
	var acked *alerts.Ack
	for _, r := range svc.Pipeline().Alerts().Open(nil) {
		if r.ID == id {
			acked = r.Acknowledged
		}
	}
	if acked == nil || acked.By != "shift-lead" {
		t.Fatalf("acknowledged %+v, want by the token's name shift-lead", acked)
	}
	var published bool
	for _, r := range svc.Records() {
		published = published || (r.ID == id && r.Acknowledged != nil && r.Acknowledged.By == "shift-lead")
	}
	if !published {
		t.Error("no published record revision acknowledged by shift-lead")
	}
}

// TestHTTPLargeRequestsLimited: while one checkpoint upload is being
// received, a second one is answered 429 once its short wait for a slot
// is over.
func TestHTTPLargeRequestsLimited(t *testing.T) {
	cfg := serviceConfig(t, `server: {embedded_port: -1}
http: {listen: "127.0.0.1:0", large_requests: 1}`)
	svc, _ := startWithClient(t, Options{Config: cfg})
	url := svc.Info().HTTP + "/api/units/tk/checkpoint"
	pr, pw := io.Pipe()
	first := make(chan int, 1)
	go func() {
		req, _ := http.NewRequest("PUT", url, pr)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			first <- -1
			return
		}
		resp.Body.Close()
		first <- resp.StatusCode
	}()
	if _, err := pw.Write([]byte(`{"format":`)); err != nil {
		t.Fatal(err)
	}
	// The client has sent the first bytes; the handler holds the slot
	// only once the server has routed the request to it.
	waitUntil(t, hangBound, "the first upload holding the slot", func() bool { return len(svc.large) == 1 })
	code, rep := do(t, http.DefaultClient, "PUT", url, "", `{}`)
	if code != http.StatusTooManyRequests {
		t.Errorf("second upload during the first: %d %v, want 429", code, rep)
	}
	pw.Close()
	select {
	case c := <-first:
		if c != http.StatusBadRequest {
			t.Errorf("truncated first upload: %d, want 400", c)
		}
	case <-time.After(hangBound):
		t.Fatal("first upload not answered")
	}
	// The handler frees its slot as it returns, which may be just after
	// the client has the answer: wait for that, not for the 1 s a request
	// waits for a slot, which a loaded machine could outlast.
	waitUntil(t, hangBound, "the first upload's slot freed", func() bool { return len(svc.large) == 0 })
	if code, _ := do(t, http.DefaultClient, "PUT", url, "", `{}`); code == http.StatusTooManyRequests {
		t.Error("upload after the first ended still refused as busy")
	}
}

// TestHTTPRefusesOpenNetworkListen: Start refuses a non-loopback listen
// address without authentication unless open_access says it is meant.
func TestHTTPRefusesOpenNetworkListen(t *testing.T) {
	cfg := &configs.Config{Frames: configs.Frames{Period: time.Second}, StateDir: t.TempDir()}
	cfg.Server.EmbeddedPort = -1
	cfg.HTTP.Listen = "0.0.0.0:0"
	cfg.ApplyDefaults()
	if _, err := Start(context.Background(), Options{Config: cfg}); err == nil || !strings.Contains(err.Error(), "no authentication") {
		t.Fatalf("Start with an open network listen: %v, want refused", err)
	}
	cfg.HTTP.OpenAccess = true
	svc, err := Start(context.Background(), Options{Config: cfg})
	if err != nil {
		t.Fatalf("with open_access: %v", err)
	}
	svc.Shutdown(context.Background())
}

// pki writes a test CA, a server certificate for 127.0.0.1 and a client
// certificate with common name cn (all ECDSA P-256) into dir, plus a
// client certificate from another CA; it returns their paths.
type pkiFiles struct {
	ca, serverCert, serverKey string
	client, stranger          tls.Certificate
	pool                      *x509.CertPool
}

func makePKI(t *testing.T, dir, cn string) pkiFiles {
	t.Helper()
	pair := func(der []byte, k *ecdsa.PrivateKey) tls.Certificate {
		return tls.Certificate{Certificate: [][]byte{der}, PrivateKey: k}
	}
	ca := natstest.NewCA(t, "modewatch test CA")
	other := natstest.NewCA(t, "another CA")
	var f pkiFiles
	f.ca = natstest.WritePEM(t, dir, "ca.pem", "CERTIFICATE", ca.Cert.Raw)
	f.serverCert, f.serverKey = ca.IssueFiles(t, dir, "server", x509.ExtKeyUsageServerAuth, net.IPv4(127, 0, 0, 1))
	f.client = pair(ca.Issue(t, cn, x509.ExtKeyUsageClientAuth, nil))
	f.stranger = pair(other.Issue(t, cn, x509.ExtKeyUsageClientAuth, nil))
	f.pool = x509.NewCertPool()
	f.pool.AddCert(ca.Cert)
	return f
}

// TestHTTPClientCertificate: HTTPS with a client certificate end to end
// (crypto/tls on both sides): the certificate's common name is the
// caller; without it (or a token) the API answers 401, and a certificate
// from another CA fails the handshake.
func TestHTTPClientCertificate(t *testing.T) {
	dir := t.TempDir()
	f := makePKI(t, dir, "ops-console")
	cfg := serviceConfig(t, `server: {embedded_port: -1}
http:
  listen: "127.0.0.1:0"
  tls: {cert: `+f.serverCert+`, key: `+f.serverKey+`, client_ca: `+f.ca+`}
  clients: [{name: ops-console, role: write}]`)
	if err := cfg.CheckFiles(); err != nil {
		t.Fatal(err)
	}
	svc, nc := startWithClient(t, Options{Config: cfg})
	base := svc.Info().HTTP
	if !strings.HasPrefix(base, "https://127.0.0.1:") {
		t.Fatalf("HTTP %q, want https", base)
	}
	client := func(certs ...tls.Certificate) *http.Client {
		return &http.Client{Transport: &http.Transport{TLSClientConfig: &tls.Config{RootCAs: f.pool, Certificates: certs}}}
	}
	if code, _ := do(t, client(), "GET", base+"/api/units", "", ""); code != http.StatusUnauthorized {
		t.Errorf("without a certificate: %d, want 401", code)
	}
	if code, _ := do(t, client(f.client), "GET", base+"/api/units", "", ""); code != http.StatusOK {
		t.Errorf("with the client certificate: %d, want 200", code)
	}
	// Sent even though the server asks for certificates of its CA only.
	force := &http.Client{Transport: &http.Transport{TLSClientConfig: &tls.Config{RootCAs: f.pool,
		GetClientCertificate: func(*tls.CertificateRequestInfo) (*tls.Certificate, error) { return &f.stranger, nil }}}}
	if resp, err := force.Get(base + "/api/units"); err == nil {
		resp.Body.Close()
		t.Errorf("a certificate from another CA was let through the handshake (status %d)", resp.StatusCode)
	}
	id := openMissingAlert(t, svc, nc)
	code, rep := do(t, client(f.client), "POST", base+"/api/alerts/ack", "", `{"alert_id":"`+id+`","by":"someone"}`)
	if code != http.StatusOK {
		t.Fatalf("ack over TLS with the certificate: %d %v", code, rep)
	}
	for _, r := range svc.Pipeline().Alerts().Open(nil) {
		if r.ID == id && (r.Acknowledged == nil || r.Acknowledged.By != "ops-console") {
			t.Errorf("acknowledged %+v, want by ops-console", r.Acknowledged)
		}
	}
}
