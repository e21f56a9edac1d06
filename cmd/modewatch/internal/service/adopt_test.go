package service

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"sync"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/stream"
)

// lineTime reads the timestamp (ns) at the end of a line-protocol line.
func lineTime(t *testing.T, l []byte) time.Time {
	t.Helper()
	l = bytes.TrimSpace(l)
	var ns int64
	if _, err := fmt.Sscan(string(l[bytes.LastIndexByte(l, ' ')+1:]), &ns); err != nil {
		t.Fatalf("line %q: %v", l, err)
	}
	return time.Unix(0, ns)
}

// TestAdoptUnitCheckpoint: a unit's checkpoint file made on another
// instance is taken over through the HTTP API by a running service that
// monitors other units: the unit scores at once with its restored model
// (no warm-up), counting on from the checkpoint, and the other units'
// frames and alerts are not disturbed.
func TestAdoptUnitCheckpoint(t *testing.T) {
	const moved = "coolwater"
	cfg := serviceConfigAt(t, t.TempDir(), 20*time.Second, `model: {warmup: 100}
server: {embedded_port: -1}
http: {listen: "127.0.0.1:0"}`)
	lines := bytes.SplitAfter(testkit.DemoLog(t, 4*time.Hour), []byte("\n"))
	cut := lineTime(t, lines[0]).Truncate(cfg.Frames.Period).Add(2 * time.Hour)

	// The other instance: every unit, first two hours; its checkpoint of
	// the moved unit.
	ch, err := stream.NewChannels(pipeline.ChannelSpecs(cfg), cfg.Frames.MaxChannels)
	if err != nil {
		t.Fatal(err)
	}
	other, err := pipeline.New(pipeline.Options{Config: cfg, Channels: ch, Period: cfg.Frames.Period})
	if err != nil {
		t.Fatal(err)
	}
	in, err := stream.NewIntake(ch, stream.Options{Align: pipeline.AlignConfig(cfg.Frames, cfg.Frames.Period)}, other.Frame)
	if err != nil {
		t.Fatal(err)
	}
	var head bytes.Buffer
	for _, l := range lines {
		if len(l) > 0 && lineTime(t, l).Before(cut) {
			head.Write(l)
		}
	}
	if err := in.Read(context.Background(), "other", &head); err != nil {
		t.Fatal(err)
	}
	ck, err := other.CheckpointUnit(moved)
	if err != nil {
		t.Fatal(err)
	}
	ckJSON, _ := json.Marshal(ck)

	// This instance: the other units from the start.
	var firstMu sync.Mutex
	var first *bool // readiness of the moved unit's first score here
	svc, nc := startWithClient(t, Options{Config: cfg, OnScore: func(u *pipeline.Unit, _ time.Time) {
		firstMu.Lock()
		if u.Name == moved && first == nil {
			r := u.Score().Ready
			first = &r
		}
		firstMu.Unlock()
	}})
	var published uint64 // lines published so far
	publish := func(keep func(l []byte) bool) {
		var b bytes.Buffer
		for _, l := range lines {
			if len(l) == 0 || !keep(l) {
				continue
			}
			published++
			b.Write(l)
			if b.Len() > 32<<10 {
				nc.Publish("modewatch.readings.demo", bytes.Clone(b.Bytes()))
				b.Reset()
			}
		}
		nc.Publish("modewatch.readings.demo", b.Bytes())
		nc.Flush()
	}
	// waitFrames waits until the service has decoded every line published
	// so far: the frames they complete are scored by then (the intake
	// scores a message's frames before it counts its lines), and the
	// frames the aligner still holds back for late readings wait for
	// readings that are not sent, so the counts compared below are final.
	// The last frame must then have reached until.
	waitFrames := func(until time.Time) {
		waitConsumed(t, svc, published)
		if n, f, last := svc.Pipeline().Frames(); last.Before(until) {
			t.Fatalf("frames did not reach %v: %d frames %v … %v", until, n, f, last)
		}
	}
	publish(func(l []byte) bool { return !bytes.HasPrefix(l, []byte(moved+",")) && lineTime(t, l).Before(cut) })
	waitFrames(cut.Add(-3 * cfg.Frames.Period))
	if svc.Pipeline().Unit(moved) != nil {
		t.Fatalf("unit %s runs before it was moved here", moved)
	}
	views := func() map[string]pipeline.UnitView {
		out := map[string]pipeline.UnitView{}
		for _, v := range svc.Pipeline().Views() {
			out[v.Name] = v
		}
		return out
	}
	openOf := func(unit string) string {
		var ids []string
		for _, r := range svc.Pipeline().Alerts().Open(nil) {
			if r.Unit == unit {
				ids = append(ids, fmt.Sprint(r.ID, r.Revision, r.State))
			}
		}
		return fmt.Sprint(ids)
	}
	before := views()
	beforeOpen := map[string]string{}
	for n := range before {
		beforeOpen[n] = openOf(n)
	}

	put := func(unit string, body []byte) int {
		req, _ := http.NewRequest(http.MethodPut, svc.Info().HTTP+"/api/units/"+unit+"/checkpoint", bytes.NewReader(body))
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		return resp.StatusCode
	}
	if code := put("air", ckJSON); code != http.StatusConflict {
		t.Errorf("checkpoint of %s put as air: %d, want 409", moved, code)
	}
	if code := put(moved, []byte(`{"format":"x"}`)); code != http.StatusBadRequest {
		t.Errorf("not a checkpoint: %d, want 400", code)
	}
	if code := put(moved, ckJSON); code != http.StatusOK {
		t.Fatalf("take over %s: %d", moved, code)
	}
	if code := put(moved, ckJSON); code != http.StatusConflict {
		t.Errorf("second take-over of a running unit: %d, want 409", code)
	}
	after := views()
	for n, v := range before {
		if a := after[n]; a.Frames != v.Frames || a.ModelState != v.ModelState || openOf(n) != beforeOpen[n] {
			t.Errorf("unit %s disturbed by the take-over: frames %d → %d, state %s → %s, open %s → %s",
				n, v.Frames, a.Frames, v.ModelState, a.ModelState, beforeOpen[n], openOf(n))
		}
	}
	if v := after[moved]; v.Frames != ck.Frames || v.ModelState == alerts.ModelWarmup {
		t.Errorf("taken-over unit: frames %d (checkpoint %d), state %s", v.Frames, ck.Frames, v.ModelState)
	}
	// Its readings now come here; it scores at once.
	end := lineTime(t, lines[len(lines)-2]).Truncate(cfg.Frames.Period)
	publish(func(l []byte) bool { return !lineTime(t, l).Before(cut) })
	waitFrames(end.Add(-3 * cfg.Frames.Period))
	firstMu.Lock()
	if first == nil || !*first {
		t.Errorf("the taken-over unit's first score here is not ready (%v): it warmed up again", first)
	}
	firstMu.Unlock()
	v := views()[moved]
	if v.Frames <= ck.Frames+300 || v.Latest == nil || !v.Latest.Ready {
		t.Errorf("taken-over unit after its readings: frames %d (checkpoint %d), latest %+v", v.Frames, ck.Frames, v.Latest)
	}
	// And the service serves the unit's checkpoint in turn.
	var back pipeline.ModelFile
	if code := getJSON(t, svc.Info().HTTP+"/api/units/"+moved+"/checkpoint", &back); code != http.StatusOK ||
		len(back.Units) != 1 || back.Units[0].Name != moved || len(back.Units[0].Alerts) == 0 || back.Frames != v.Frames {
		t.Errorf("GET checkpoint: %d, %d units, frames %d (view %d)", code, len(back.Units), back.Frames, v.Frames)
	}
	if code := getJSON(t, svc.Info().HTTP+"/api/units/nosuch/checkpoint", nil); code != http.StatusNotFound {
		t.Errorf("checkpoint of an unknown unit: %d", code)
	}
}
