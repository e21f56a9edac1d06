package service

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/sim"
	"modewatch/stream/natsource/natstest"
)

// fitDay1 fits a model on the fault-free first day of the demo scenario
// (invented data) and returns the model file's path.
func fitDay1(t *testing.T, dir string) string {
	t.Helper()
	day1 := testkit.DemoScenario(t, 24*time.Hour)
	return fitFile(t, dir, day1.Period, bytes.NewReader(testkit.LineProtocol(t, day1)))
}

// fitFile fits a model with the default settings on the line protocol in
// r, framed at period, and writes it to dir/model.json, whose path it
// returns.
func fitFile(t *testing.T, dir string, period time.Duration, r io.Reader) string {
	t.Helper()
	cfg := &configs.Config{Frames: configs.Frames{Period: period}}
	cfg.ApplyDefaults()
	res, err := pipeline.Replay(context.Background(), pipeline.ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: r, Fit: true})
	if err != nil {
		t.Fatal(err)
	}
	m, err := res.Pipeline.Baseline()
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(dir, "model.json")
	if err := pipeline.WriteModel(p, m); err != nil {
		t.Fatal(err)
	}
	return p
}

// fittedConfig returns a service configuration with the model of fitDay1,
// an embedded server, the HTTP API on a free loopback port and its state
// under dir, plus the YAML lines of extra.
func fittedConfig(t *testing.T, dir, extra string) *configs.Config {
	t.Helper()
	modelFile := fitDay1(t, dir)
	return serviceConfigAt(t, dir, 20*time.Second, `server: {embedded_port: -1}
http: {listen: "127.0.0.1:0"}
model: {file: `+modelFile+`}
`+extra)
}

func getJSON(t *testing.T, url string, v any) int {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if v != nil {
		if err := json.NewDecoder(resp.Body).Decode(v); err != nil {
			t.Fatalf("%s: %v", url, err)
		}
	}
	return resp.StatusCode
}

// TestServiceEndToEnd: the simulator publishes the demo scenario (with its
// labelled faults) to the service's embedded NATS server; the service
// raises alerts on the alerts subject, at least one of which starts inside
// a labelled episode and names one of its channels among its top three;
// the HTTP API answers, /metrics parses with the Prometheus text parser,
// an acknowledge command is applied, and a graceful shutdown checkpoints
// every unit.
func TestServiceEndToEnd(t *testing.T) {
	if testing.Short() {
		t.Skip("publishes two simulated days")
	}
	dir := t.TempDir()
	// The demo's test days are published at 21600 times real time (two
	// days, 34560 messages, in about eight seconds); under the race detector on
	// a loaded machine the service decodes slower than that, and its
	// bounded intake queue (default 4096 messages) drops the overflow, as
	// it should: the last readings were lost and the frames stopped short
	// of the end. The queue here holds the whole scenario, so the test
	// checks the scoring, not the machine's speed.
	cfg := fittedConfig(t, dir, "checkpoint_interval: 1m\nintake: {queue: {messages: 65536}}\n")
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	svc, err := Start(ctx, Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	defer svc.Shutdown(context.Background())
	info := svc.Info()
	if !info.Embedded || !strings.HasPrefix(info.HTTP, "http://127.0.0.1:") {
		t.Fatalf("info %+v", info)
	}

	nc, err := nats.Connect(info.NATS)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	var mu sync.Mutex
	latest := map[string]alerts.Record{}
	sub, err := nc.Subscribe("modewatch.alerts.>", func(m *nats.Msg) {
		var r alerts.Record
		if err := json.Unmarshal(m.Data, &r); err != nil {
			t.Errorf("alert message is not a record: %v", err)
			return
		}
		if !strings.HasSuffix(m.Subject, "."+r.Unit) {
			t.Errorf("record of unit %s on subject %s", r.Unit, m.Subject)
		}
		mu.Lock()
		latest[r.ID] = r
		mu.Unlock()
	})
	if err != nil {
		t.Fatal(err)
	}
	defer sub.Unsubscribe()
	scores, _ := nc.SubscribeSync("modewatch.scores.air")
	nc.Flush()

	demo, _ := sim.Demo()
	sc := demo.Tested() // the two test days after the split, with the faults
	// The two test days in about eight seconds.
	if _, err := sc.Live(ctx, nc, "modewatch", sc.Duration.Seconds()/8); err != nil {
		t.Fatal(err)
	}
	// The last frames stay pending until later readings pass their end
	// plus the allowed lateness (one period).
	end := sc.End().Add(-4 * sc.Period)
	deadline := time.Now().Add(3 * time.Minute)
	for {
		_, _, last := svc.Pipeline().Frames()
		if !last.Before(end) {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("service saw frames up to %v, scenario ends %v (connection %+v)", last, sc.End(), svc.Conn().Stats())
		}
		time.Sleep(50 * time.Millisecond)
	}
	if m, err := scores.NextMsg(hangBound); err != nil || !bytes.HasPrefix(m.Data, []byte("modewatch_scores,unit=air ")) {
		t.Errorf("score message %v: %v", m, err)
	}
	// Every record the service holds reaches the alerts subject, at its
	// latest revision (the NATS delivery works from a queue).
	natstest.WaitFor(t, hangBound, "every record on the alerts subject", func() bool {
		mu.Lock()
		defer mu.Unlock()
		for _, r := range svc.Records() {
			if latest[r.ID].Revision < r.Revision {
				return false
			}
		}
		return true
	})

	mu.Lock()
	recs := make([]alerts.Record, 0, len(latest))
	for _, r := range latest {
		recs = append(recs, r)
	}
	mu.Unlock()
	isolated := ""
	for _, ep := range sc.Truth().Episodes {
		for _, r := range recs {
			if r.Start.Before(ep.Start) || r.Start.After(ep.End) {
				continue
			}
			for i, c := range r.Contributors {
				for _, ec := range ep.Channels {
					if i < 3 && c.Channel == ec {
						isolated = ep.ID + " by " + r.ID
					}
				}
			}
		}
	}
	if isolated == "" {
		t.Errorf("no alert on the alerts subject named a faulty channel in its top three (%d records)", len(recs))
	} else {
		t.Logf("episode %s", isolated)
	}
	for _, r := range recs {
		if r.Caution != alerts.Caution {
			t.Errorf("record %s without the advisory caution", r.ID)
		}
	}

	// HTTP API.
	var health map[string]string
	if code := getJSON(t, info.HTTP+"/healthz", &health); code != 200 || health["status"] != "ok" {
		t.Errorf("/healthz %d %v", code, health)
	}
	if code := getJSON(t, info.HTTP+"/readyz", nil); code != 200 {
		t.Errorf("/readyz %d", code)
	}
	var units []pipeline.UnitView
	if code := getJSON(t, info.HTTP+"/api/units", &units); code != 200 || len(units) != 4 {
		t.Fatalf("/api/units %d: %d units", code, len(units))
	}
	var air pipeline.UnitView
	if code := getJSON(t, info.HTTP+"/api/units/air", &air); code != 200 || len(air.Modes) == 0 || air.Latest == nil || air.Latest.T2 == nil {
		t.Errorf("/api/units/air %d: %+v", code, air)
	}
	if code := getJSON(t, info.HTTP+"/api/units/nosuch", nil); code != 404 {
		t.Errorf("/api/units/nosuch %d", code)
	}
	var open []alerts.Record
	if code := getJSON(t, info.HTTP+"/api/alerts", &open); code != 200 {
		t.Errorf("/api/alerts %d", code)
	}
	// An alert to acknowledge: a notice (a new operating point or state) is
	// informational, closed when it is written, and takes no acknowledgement.
	ackID := ""
	for _, r := range recs {
		if r.Kind != alerts.KindNotice {
			ackID = r.ID
			break
		}
	}
	if ackID != "" {
		body := `{"alert_id":"` + ackID + `","by":"test","comment":"seen"}`
		resp, err := http.Post(info.HTTP+"/api/alerts/ack", "application/json", strings.NewReader(body))
		if err != nil {
			t.Fatal(err)
		}
		var rep alerts.Reply
		json.NewDecoder(resp.Body).Decode(&rep)
		resp.Body.Close()
		if resp.StatusCode != 200 || !rep.OK {
			t.Errorf("ack: %d %+v", resp.StatusCode, rep)
		}
	}
	resp, err := http.Post(info.HTTP+"/api/alerts/ack", "application/json", strings.NewReader(`{"by":"test"}`))
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != 400 {
		t.Errorf("ack without alert_id: %d, want 400", resp.StatusCode)
	}

	// Accept a unit's state as normal, through the HTTP API: the reply
	// says how many incidents were accepted (possibly none by now).
	resp, err = http.Post(info.HTTP+"/api/units/air/accept", "application/json", strings.NewReader(`{"by":"test","comment":"new grade"}`))
	if err != nil {
		t.Fatal(err)
	}
	var arep alerts.Reply
	json.NewDecoder(resp.Body).Decode(&arep)
	resp.Body.Close()
	if resp.StatusCode != 200 || !arep.OK || !strings.Contains(arep.Message, "accept") {
		t.Errorf("accept: %d %+v", resp.StatusCode, arep)
	}

	// Maintenance for a unit, through the HTTP API.
	resp, err = http.Post(info.HTTP+"/api/units/coolwater/maintenance", "application/json",
		strings.NewReader(`{"on":true,"by":"test","reason":"pump swap"}`))
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Errorf("maintenance: %d", resp.StatusCode)
	}
	var cw pipeline.UnitView
	if getJSON(t, info.HTTP+"/api/units/coolwater", &cw); !cw.InMaintenance {
		t.Error("coolwater not in maintenance after the command")
	}

	// /metrics parses with the Prometheus text-format parser.
	resp, err = http.Get(info.HTTP + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	parser := expfmt.NewTextParser(model.LegacyValidation)
	fams, err := parser.TextToMetricFamilies(bytes.NewReader(body))
	if err != nil {
		t.Fatalf("/metrics does not parse: %v", err)
	}
	for _, name := range []string{"modewatch_frames_total", "modewatch_lines_total", "modewatch_statistic", "modewatch_statistic_limit",
		"modewatch_alerts_open", "modewatch_nats_connected", "modewatch_readings_queue_depth", "modewatch_unit_refresh_iterations",
		"modewatch_unit_refreshes_total", "modewatch_unit_last_refresh_seconds", "modewatch_unit_warming_channels",
		"modewatch_delivery_queue_depth", "modewatch_delivery_spool_pending_bytes", "modewatch_delivery_dropped_total",
		"modewatch_delivery_delivered_total"} {
		if fams[name] == nil {
			t.Errorf("/metrics lacks %s", name)
		}
	}
	for name, f := range fams {
		if strings.Contains(name, "sink") {
			t.Errorf("/metrics has %s: delivery metrics are named modewatch_delivery_*", name)
		}
		if strings.HasPrefix(name, "modewatch_delivery_") && f.Metric[0].GetLabel()[0].GetName() != "target" {
			t.Errorf("%s labelled %v, want target", name, f.Metric[0].GetLabel())
		}
	}
	if f := fams["modewatch_nats_connected"]; f != nil && f.Metric[0].GetGauge().GetValue() != 1 {
		t.Errorf("modewatch_nats_connected = %v", f.Metric[0].GetGauge().GetValue())
	}

	// Graceful shutdown writes a checkpoint per unit.
	sctx, scancel := context.WithTimeout(context.Background(), hangBound)
	defer scancel()
	if err := svc.Shutdown(sctx); err != nil {
		t.Errorf("shutdown: %v", err)
	}
	cks, errs := pipeline.ReadCheckpoints(filepath.Join(dir, "data", "checkpoints"))
	if len(cks) != 4 || len(errs) > 0 {
		t.Errorf("%d checkpoints after shutdown: %v", len(cks), errs)
	}
}

// startWithClient starts the service with opt (its configuration with an
// embedded server) and returns it with a client connection to that server;
// both are closed when the test ends, the connection first.
func startWithClient(t *testing.T, opt Options) (*Service, *nats.Conn) {
	t.Helper()
	svc, err := Start(context.Background(), opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { svc.Shutdown(context.Background()) })
	return svc, natsClient(t, svc)
}
