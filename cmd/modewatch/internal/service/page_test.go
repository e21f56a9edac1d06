package service

import (
	"bufio"
	"context"
	"io"
	"math"
	"net/http"
	"strings"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/statuspage"
	"modewatch/sim"
)

// TestStatusPageServed: the service serves the status page at / on its
// HTTP listener with the caution, the plant view lists every unit with
// its trend from the history ring, and a shutdown is not held up by an
// open event stream (it returns without error well within its deadline).
func TestStatusPageServed(t *testing.T) {
	if testing.Short() {
		t.Skip("publishes two simulated hours")
	}
	cfg := fittedConfig(t, t.TempDir(), "")
	svc, nc := startWithClient(t, Options{Config: cfg, Stdout: io.Discard})
	sc, err := sim.Demo()
	if err != nil {
		t.Fatal(err)
	}
	live := sc.Clone()
	live.Start = sc.Start.Add(24 * time.Hour)
	live.Duration = 2 * time.Hour
	live.Episodes = nil
	if _, err := live.Live(context.Background(), nc, "modewatch", math.Inf(1)); err != nil {
		t.Fatal(err)
	}
	base := svc.Info().HTTP
	var plant statuspage.Plant
	deadline := time.Now().Add(30 * time.Second)
	for time.Now().Before(deadline) {
		plant = statuspage.Plant{}
		getJSON(t, base+"/page/data/plant", &plant)
		if len(plant.Units) == len(sc.Units) && plant.Units[0].Trend != nil && plant.Units[0].Frames > 300 {
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	if len(plant.Units) != len(sc.Units) {
		t.Fatalf("plant view lists %d units, want %d", len(plant.Units), len(sc.Units))
	}
	for _, u := range plant.Units {
		if u.Trend == nil || u.Ratio["t2"] == nil {
			t.Errorf("unit %s: no trend or no T² ratio", u.Name)
			continue
		}
		kept := 0
		for _, v := range u.Trend.T2.Value {
			if v != nil {
				kept++
			}
		}
		// Two hours at 5-minute points: about 24 of the 48 points.
		if kept < 20 {
			t.Errorf("unit %s: %d trend points of two hours, want about 24", u.Name, kept)
		}
	}
	res, err := http.Get(base + "/")
	if err != nil {
		t.Fatal(err)
	}
	page, _ := io.ReadAll(res.Body)
	res.Body.Close()
	if res.StatusCode != 200 || !strings.Contains(string(page), "modewatch is advisory") || !strings.Contains(res.Header.Get("Content-Type"), "text/html") {
		t.Errorf("GET /: %d %s, want the page with the caution", res.StatusCode, res.Header.Get("Content-Type"))
	}

	// An open event stream, then a shutdown.
	res, err = http.Get(base + "/page/events?view=plant")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	if line, _ := bufio.NewReader(res.Body).ReadString('\n'); !strings.HasPrefix(line, "retry:") {
		t.Fatalf("event stream starts with %q", line)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	if err := svc.Shutdown(ctx); err != nil {
		t.Errorf("shutdown with an open event stream: %v", err)
	}
	if ctx.Err() != nil {
		t.Error("shutdown took its whole deadline")
	}
}
