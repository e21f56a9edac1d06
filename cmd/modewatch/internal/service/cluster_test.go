package service

import (
	"context"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go/jetstream"

	"modewatch/configs"
	"modewatch/sim"
	"modewatch/stream/natsource/natstest"
)

// readingsServer starts a JetStream server holding the READINGS stream of
// the demo's reading subjects.
func readingsServer(t *testing.T) *server.Server {
	srv := natstest.StartJetStream(t)
	js, _ := jetstream.New(natstest.Connect(t, srv))
	if _, err := js.CreateStream(context.Background(), jetstream.StreamConfig{Name: "READINGS", Subjects: []string{"modewatch.readings.>"}}); err != nil {
		t.Fatal(err)
	}
	return srv
}

// TestClusterViews: two instances in one process share the demo plant's
// four units over a JetStream server: /api/cluster lists both with two
// units each, /api/units gives every unit its owner and when it moved
// (the units owned here with their frames), /metrics names the owners, and
// a graceful shutdown of one leaves the other with all four.
func TestClusterViews(t *testing.T) {
	srv := readingsServer(t)
	nc := natstest.Connect(t, srv)
	ctx := context.Background()
	sc, _ := sim.Demo()
	var units []string
	for _, u := range sc.Units {
		units = append(units, u.Name)
	}
	start := func(id string) *Service {
		cfg := &configs.Config{
			Server:             configs.Server{URLs: []string{srv.ClientURL()}},
			Intake:             configs.Intake{JetStream: configs.JetStream{Stream: "READINGS"}},
			Frames:             configs.Frames{Period: sc.Period},
			Model:              configs.Model{WarmUp: 30},
			HTTP:               configs.HTTP{Listen: "127.0.0.1:0"},
			StateDir:           t.TempDir(),
			CheckpointInterval: time.Second,
			// A lease lives 10 s: a round every 3.3 s renews it, so a
			// loaded machine cannot let it lapse and move a unit between
			// the instances mid-test (the moves checked here are the
			// hand-overs, which do not wait for the TTL).
			Cluster: configs.Cluster{Instance: id, Units: units, LeaseTTL: 10 * time.Second},
		}
		cfg.ApplyDefaults()
		if err := cfg.Validate(); err != nil {
			t.Fatal(err)
		}
		svc, err := Start(ctx, Options{Config: cfg, Stdout: io.Discard})
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { svc.Shutdown(context.Background()) })
		return svc
	}
	a, b := start("a"), start("b")
	type clusterDoc struct {
		Instances []struct {
			ID    string   `json:"id"`
			Units []string `json:"units"`
		} `json:"instances"`
	}
	wait := func(what string, cond func() bool) {
		t.Helper()
		tick := time.NewTicker(50 * time.Millisecond)
		defer tick.Stop()
		for end := time.Now().Add(hangBound); !cond(); <-tick.C {
			if time.Now().After(end) {
				t.Fatalf("not within %v: %s", hangBound, what)
			}
		}
	}
	spread := func(svc *Service, per map[string]int) func() bool {
		return func() bool {
			var doc clusterDoc
			if getJSON(t, svc.Info().HTTP+"/api/cluster", &doc) != http.StatusOK || len(doc.Instances) != len(per) {
				return false
			}
			for _, in := range doc.Instances {
				if len(in.Units) != per[in.ID] {
					return false
				}
			}
			return true
		}
	}
	wait("two units on each instance", spread(a, map[string]int{"a": 2, "b": 2}))

	hour := sc.Head(time.Hour)
	if _, err := hour.Live(ctx, nc, "modewatch", 1e9); err != nil {
		t.Fatal(err)
	}
	type unitDoc struct {
		Name   string    `json:"name"`
		Owner  string    `json:"owner"`
		Moved  time.Time `json:"moved"`
		Frames uint64    `json:"frames"`
	}
	var docs []unitDoc
	wait("every unit scored by its owner", func() bool {
		docs = nil
		n := 0
		for _, svc := range []*Service{a, b} {
			var ds []unitDoc
			getJSON(t, svc.Info().HTTP+"/api/units", &ds)
			for _, d := range ds {
				if d.Frames > 0 {
					n++
				}
			}
			docs = ds
		}
		return n == len(units)
	})
	if len(docs) != len(units) {
		t.Fatalf("/api/units lists %d units, want all %d of the cluster", len(docs), len(units))
	}
	for _, d := range docs {
		if d.Owner != "a" && d.Owner != "b" || d.Moved.IsZero() {
			t.Errorf("unit %s: owner %q moved %v", d.Name, d.Owner, d.Moved)
		}
		if d.Owner != "b" && d.Frames > 0 {
			t.Errorf("unit %s owned by %s shows %d frames on b", d.Name, d.Owner, d.Frames)
		}
	}
	resp, err := http.Get(a.Info().HTTP + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, u := range units {
		if !strings.Contains(string(body), `modewatch_cluster_unit_owner{instance="`) || !strings.Contains(string(body), `unit="`+u+`"} 1`) {
			t.Errorf("/metrics has no owner of unit %s", u)
		}
	}

	sctx, cancel := context.WithTimeout(ctx, hangBound)
	defer cancel()
	if err := b.Shutdown(sctx); err != nil {
		t.Fatal(err)
	}
	wait("all four units on a after b stopped", spread(a, map[string]int{"a": 4}))
}
