package service

import (
	"bufio"
	"context"
	"encoding/json"
	"io"
	"math"
	"net/http"
	"slices"
	"strings"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/access"
	"modewatch/cmd/modewatch/internal/statuspage"
	"modewatch/configs"
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
	live := sc.Normal() // the second normal day
	live.Start = sc.Start.Add(24 * time.Hour)
	live.Duration = 2 * time.Hour
	live.Episodes = nil
	if _, err := live.Live(context.Background(), nc, "modewatch", math.Inf(1)); err != nil {
		t.Fatal(err)
	}
	// Every reading decoded, so every frame the two hours form is scored
	// and in the history ring; then the page's view (read from its source
	// at most once per update interval) shows each unit's final count.
	waitConsumed(t, svc, scenarioLines(t, live))
	scored := map[string]uint64{}
	for _, v := range svc.Pipeline().Views() {
		scored[v.Name] = v.Frames
	}
	base := svc.Info().HTTP
	var plant statuspage.Plant
	deadline := time.Now().Add(hangBound)
	for {
		plant = statuspage.Plant{}
		getJSON(t, base+"/page/data/plant", &plant)
		final := len(plant.Units) == len(scored)
		for _, u := range plant.Units {
			final = final && u.Frames == scored[u.Name]
		}
		if final {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("plant view: %+v; scored frames per unit %v", plant.Units, scored)
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
	ctx, cancel := context.WithTimeout(context.Background(), hangBound)
	defer cancel()
	if err := svc.Shutdown(ctx); err != nil {
		t.Errorf("shutdown with an open event stream: %v", err)
	}
	if ctx.Err() != nil {
		t.Error("shutdown took its whole deadline")
	}
}

// A reader's (viewer) and a writer's (shift-lead) bearer tokens, and a
// service configuration that takes them.
const testReader, testWriter = "reader-token-0123456789abcdef", "writer-token-0123456789abcdef"

func tokenConfig(t *testing.T) *configs.Config {
	t.Helper()
	return serviceConfig(t, `server: {embedded_port: -1}
http:
  listen: "127.0.0.1:0"
  tokens:
    - {name: viewer, role: read, hash: "`+access.HashToken(testReader)+`"}
    - {name: shift-lead, role: write, hash: "`+access.HashToken(testWriter)+`"}`)
}

// TestStatusPageTokens: the page's data and event stream take the API's
// read permission (401 without a token or with an unknown one, 200 with a
// reader's), its shell and assets answer everyone and hold no plant data,
// and /page/me offers the actions to a writer only, under the token's name.
func TestStatusPageTokens(t *testing.T) {
	reader, writer := testReader, testWriter
	svc, nc := startWithClient(t, Options{Config: tokenConfig(t)})
	openMissingAlert(t, svc, nc)
	base := svc.Info().HTTP
	status := func(path, token string) int {
		ctx, cancel := context.WithTimeout(context.Background(), hangBound)
		defer cancel()
		req, _ := http.NewRequestWithContext(ctx, "GET", base+path, nil)
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		res.Body.Close() // an event stream is cut here
		return res.StatusCode
	}
	for _, path := range []string{"/page/me", "/page/data/plant", "/page/data/unit/tk", "/page/data/incidents", "/page/events?view=plant"} {
		for _, c := range []struct {
			token string
			code  int
		}{{"", 401}, {"wrong-token-0123456789", 401}, {reader, 200}, {writer, 200}} {
			if got := status(path, c.token); got != c.code {
				t.Errorf("GET %s with token %q: %d, want %d", path, c.token, got, c.code)
			}
		}
	}
	for _, path := range []string{"/", "/page/assets/page.js", "/page/assets/page.css"} {
		res, err := http.Get(base + path)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(res.Body)
		res.Body.Close()
		if res.StatusCode != 200 || strings.Contains(string(b), "tk.") {
			t.Errorf("GET %s without a token: %d (plant data in it: %v), want 200 without plant data", path, res.StatusCode, strings.Contains(string(b), "tk."))
		}
	}
	var me struct {
		Identity statuspage.Identity `json:"identity"`
		Ops      []string            `json:"ops"`
	}
	if code, v := do(t, http.DefaultClient, "GET", base+"/page/me", reader, ""); code == 200 {
		b, _ := json.Marshal(v)
		_ = json.Unmarshal(b, &me)
		if me.Identity.CanWrite || len(me.Ops) != 0 || me.Identity.Name != "viewer" || !me.Identity.Auth {
			t.Errorf("reader's /page/me %+v, want viewer without write or operations", me)
		}
	}
	if code, v := do(t, http.DefaultClient, "GET", base+"/page/me", writer, ""); code == 200 {
		b, _ := json.Marshal(v)
		_ = json.Unmarshal(b, &me)
		if !me.Identity.CanWrite || me.Identity.Name != "shift-lead" || !slices.Contains(me.Ops, "accept") {
			t.Errorf("writer's /page/me %+v, want shift-lead with write and the accept operation", me)
		}
	}
}
