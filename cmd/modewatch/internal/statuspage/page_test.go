package statuspage

import (
	"bufio"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
)

// FakeGuard is a stand-in for the service's token check: "Bearer r" may
// read, "Bearer w" may read and write, anything else is refused with 401.
func FakeGuard(h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		switch r.Header.Get("Authorization") {
		case "Bearer r", "Bearer w":
			h.ServeHTTP(w, r)
		default:
			http.Error(w, "unauthorized", http.StatusUnauthorized)
		}
	})
}

func FakeIdentify(r *http.Request) Identity {
	if r.Header.Get("Authorization") == "Bearer w" {
		return Identity{Name: "writer", CanWrite: true, Auth: true}
	}
	return Identity{Name: "reader", Auth: true}
}

func newTestServer(t *testing.T, src Source, hist *History, opt Options) (*Page, *httptest.Server) {
	t.Helper()
	pg := New(src, hist, opt)
	mux := http.NewServeMux()
	pg.Register(mux)
	srv := httptest.NewServer(mux)
	t.Cleanup(srv.Close)
	return pg, srv
}

func get(t *testing.T, url, token string) (*http.Response, string) {
	t.Helper()
	req, _ := http.NewRequest("GET", url, nil)
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	b, _ := io.ReadAll(res.Body)
	return res, string(b)
}

// TestAccess: every handler that returns plant data sits behind the
// injected read check (401 without a token), the page shell and its
// assets carry no plant data, and /page/me offers the write actions to a
// writer only.
func TestAccess(t *testing.T) {
	f := NewFakePlant(5, 20)
	_, srv := newTestServer(t, f, f.Hist, Options{Read: FakeGuard, Identify: FakeIdentify, Ops: []string{alerts.OpAck, alerts.OpShelve}, Caution: "CAUTION-TEXT"})
	for _, path := range []string{"/page/me", "/page/data/plant", "/page/data/unit/unit03", "/page/data/incidents", "/page/events?view=plant"} {
		for _, c := range []struct {
			token string
			code  int
		}{{"", 401}, {"bad", 401}, {"r", 200}, {"w", 200}} {
			req, _ := http.NewRequest("GET", srv.URL+path, nil)
			if c.token != "" {
				req.Header.Set("Authorization", "Bearer "+c.token)
			}
			ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
			res, err := http.DefaultClient.Do(req.WithContext(ctx))
			if err != nil {
				cancel()
				t.Fatal(err)
			}
			res.Body.Close()
			cancel()
			if res.StatusCode != c.code {
				t.Errorf("GET %s with token %q: %d, want %d", path, c.token, res.StatusCode, c.code)
			}
		}
	}
	for _, path := range []string{"/", "/page/assets/page.js", "/page/assets/page.css"} {
		res, body := get(t, srv.URL+path, "")
		if res.StatusCode != 200 {
			t.Errorf("GET %s: %d", path, res.StatusCode)
		}
		if strings.Contains(body, "unit0") {
			t.Errorf("GET %s without a token shows plant data", path)
		}
	}
	_, body := get(t, srv.URL+"/", "")
	if strings.Count(body, "CAUTION-TEXT") < 2 {
		t.Errorf("the page does not carry the caution at its top and foot:\n%s", body)
	}
	var me struct {
		Identity Identity `json:"identity"`
		Ops      []string `json:"ops"`
	}
	_, body = get(t, srv.URL+"/page/me", "r")
	if err := json.Unmarshal([]byte(body), &me); err != nil || me.Identity.CanWrite || len(me.Ops) != 0 {
		t.Errorf("reader's /page/me = %s, want no write and no operations", body)
	}
	_, body = get(t, srv.URL+"/page/me", "w")
	if err := json.Unmarshal([]byte(body), &me); err != nil || !me.Identity.CanWrite || len(me.Ops) != 2 || me.Identity.Name != "writer" {
		t.Errorf("writer's /page/me = %s, want write with ack and shelve", body)
	}
	if res, _ := get(t, srv.URL+"/page/data/unit/nosuch", "r"); res.StatusCode != 404 {
		t.Errorf("unknown unit: %d, want 404", res.StatusCode)
	}
}

// TestPlantOrder: abnormal units come first — open incidents by
// severity, then statistics over their limits, then data-quality
// problems — and normal units after them by name.
func TestPlantOrder(t *testing.T) {
	f := NewFakePlant(12, 10)
	// unit03 has a high incident and is over its limits (NewFakePlant);
	// give unit07 a low incident, and unit05 has missing channels.
	f.open = append(f.open, alerts.Record{ID: "x", Unit: "unit07", Group: alerts.GroupQuality, Severity: "low",
		Quality: &alerts.RecordQuality{Kind: "stuck", Channel: "unit07.asset0.ch001"}})
	f.views[3].State = "high-load" // unit03's operating state
	pg := New(f, f.Hist, Options{})
	p := pg.plant(pg.snapshot())
	if p.Units[0].Operating != "high-load" {
		t.Errorf("unit03's operating state %q, want high-load", p.Units[0].Operating)
	}
	var got []string
	for _, u := range p.Units {
		got = append(got, u.Name)
	}
	// unit03: a high incident; unit07: a low one (and the fake plant's
	// acknowledged stuck sensor); unit05: missing channels; the rest are
	// normal and follow by their largest ratio.
	if got[0] != "unit03" || got[1] != "unit07" || got[2] != "unit05" {
		t.Errorf("order %v, want unit03 (high incident), unit07 (low incident), unit05 (missing channels) first", got)
	}
	if p.Units[0].Incidents[0].Top[0] != "unit03.asset0.ch000" || len(p.Units[0].Incidents[0].Top) != 3 {
		t.Errorf("top sensors %v, want the first three contributors", p.Units[0].Incidents[0].Top)
	}
	// What is wrong, in the first contributor's terms (the fake plant's
	// reading 52, expected 50, band 1.2: one decimal for a band of 1.2).
	if w := p.Units[0].Incidents[0].What; w != "unit03.asset0.ch000 reads 52.0, expected 50.0 ± 1.2" {
		t.Errorf("incident's what %q, want the first contributor's reading against its expected value", w)
	}
	found := false
	for _, b := range p.Units[1].Incidents {
		if b.ID == "x" {
			found = true
			if b.What != "stuck unit07.asset0.ch001" {
				t.Errorf("quality incident's what %q, want its kind and channel", b.What)
			}
		}
	}
	if !found {
		t.Error("unit07's incident x not in the plant view")
	}
	if p.Units[2].Missing.Count != 3 {
		t.Errorf("unit05 missing %+v, want 3", p.Units[2].Missing)
	}
	if p.Units[0].Trend == nil || len(p.Units[0].Trend.T2.Value) != DefaultTrendPoints {
		t.Errorf("unit03 trend %+v, want %d points", p.Units[0].Trend, DefaultTrendPoints)
	}
}

// event is one server-sent event as read by readEvents.
type event struct {
	id, name string
	data     string
	at       time.Time
}

// readEvents reads server-sent events from body into ch until it ends.
func readEvents(body io.Reader, ch chan<- event) {
	defer close(ch)
	sc := bufio.NewScanner(body)
	sc.Buffer(make([]byte, 1<<20), 16<<20)
	var e event
	for sc.Scan() {
		line := sc.Text()
		switch {
		case line == "":
			if e.name != "" {
				e.at = time.Now()
				ch <- e
			}
			e = event{}
		case strings.HasPrefix(line, "id: "):
			e.id = line[4:]
		case strings.HasPrefix(line, "event: "):
			e.name = line[7:]
		case strings.HasPrefix(line, "data: "):
			e.data = line[6:]
		}
	}
}

func openEvents(t *testing.T, ctx context.Context, url string, lastID string) (*http.Response, chan event) {
	t.Helper()
	req, _ := http.NewRequestWithContext(ctx, "GET", url, nil)
	if lastID != "" {
		req.Header.Set("Last-Event-ID", lastID)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	ch := make(chan event, 64)
	if res.StatusCode == 200 {
		go readEvents(res.Body, ch)
	} else {
		res.Body.Close()
		close(ch)
	}
	return res, ch
}

func next(t *testing.T, ch <-chan event) event {
	t.Helper()
	select {
	case e, ok := <-ch:
		if !ok {
			t.Fatal("event stream ended")
		}
		return e
	case <-time.After(time.Minute): // a hang bound
		t.Fatal("no event within a minute")
	}
	return event{}
}

// TestEventsClientLimit: at most MaxClients streams are open; one more
// is refused with 503 and Retry-After, and a slot freed by a closed
// stream is taken again.
func TestEventsClientLimit(t *testing.T) {
	f := NewFakePlant(3, 10)
	pg, srv := newTestServer(t, f, f.Hist, Options{MaxClients: 2, Interval: 50 * time.Millisecond})
	ctx1, cancel1 := context.WithCancel(context.Background())
	defer cancel1()
	ctx2, cancel2 := context.WithCancel(context.Background())
	defer cancel2()
	_, ch1 := openEvents(t, ctx1, srv.URL+"/page/events?view=plant", "")
	_, ch2 := openEvents(t, ctx2, srv.URL+"/page/events?view=incidents", "")
	next(t, ch1)
	next(t, ch2)
	if n, _ := pg.Clients(); n != 2 {
		t.Fatalf("%d clients, want 2", n)
	}
	res, _ := openEvents(t, context.Background(), srv.URL+"/page/events?view=plant", "")
	if res.StatusCode != http.StatusServiceUnavailable || res.Header.Get("Retry-After") == "" {
		t.Fatalf("third client: %d (Retry-After %q), want 503 with Retry-After", res.StatusCode, res.Header.Get("Retry-After"))
	}
	if _, refused := pg.Clients(); refused != 1 {
		t.Errorf("%d refused, want 1", refused)
	}
	cancel1()
	deadline := time.Now().Add(time.Minute)
	for n, _ := pg.Clients(); n != 1 && time.Now().Before(deadline); n, _ = pg.Clients() {
		time.Sleep(10 * time.Millisecond)
	}
	ctx3, cancel3 := context.WithCancel(context.Background())
	defer cancel3()
	res, ch3 := openEvents(t, ctx3, srv.URL+"/page/events?view=plant", "")
	if res.StatusCode != 200 {
		t.Fatalf("after one client left: %d, want 200", res.StatusCode)
	}
	next(t, ch3)
}

// TestEventsRate: a view that changes on every read is sent at most once
// per interval to a client, ids count on from Last-Event-ID (a resumed
// stream), and an unchanged view is not sent again.
func TestEventsRate(t *testing.T) {
	f := NewFakePlant(3, 10)
	const interval = 100 * time.Millisecond
	stop := make(chan struct{})
	defer close(stop)
	go func() { // the plant changes far faster than the interval
		for {
			select {
			case <-stop:
				return
			case <-time.After(time.Millisecond):
				f.Bump()
			}
		}
	}()
	_, srv := newTestServer(t, f, f.Hist, Options{Interval: interval})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	asked := time.Now()
	_, ch := openEvents(t, ctx, srv.URL+"/page/events?view=plant", "41")
	const n = 8
	evs := make([]event, n)
	for i := range evs {
		evs[i] = next(t, ch)
	}
	if evs[0].id != "42" || evs[n-1].id != "49" {
		t.Errorf("ids %s … %s, want 42 … 49 after Last-Event-ID 41", evs[0].id, evs[n-1].id)
	}
	// n events of a view that changed every millisecond span at least
	// n-1 intervals, counted from the request: the stream's ticker starts
	// after the request was sent and each event after the first waits for
	// a tick of its own, and no event arrives before it is sent. (Counted
	// between the first and the last arrival instead, a first event read
	// late, with the second, would shorten the span on a loaded machine.)
	if span := evs[n-1].at.Sub(asked); span < time.Duration(n-1)*interval {
		t.Errorf("%d events %s after the request: more than one per %s", n, span, interval)
	}
	var p Plant
	if err := json.Unmarshal([]byte(evs[0].data), &p); err != nil || len(p.Units) != 3 {
		t.Errorf("event data is not the plant view: %v", err)
	}

	// A still plant: after the first event, nothing until it changes.
	g := NewFakePlant(2, 5)
	_, srv2 := newTestServer(t, g, g.Hist, Options{Interval: 20 * time.Millisecond})
	_, ch2 := openEvents(t, ctx, srv2.URL+"/page/events?view=plant", "")
	next(t, ch2)
	select {
	case e := <-ch2:
		t.Errorf("an unchanged view was sent again: %s", e.id)
	case <-time.After(300 * time.Millisecond):
	}
	g.Bump()
	if e := next(t, ch2); e.id != "2" {
		t.Errorf("after a change: event %s, want 2", e.id)
	}
}

// TestEventsOutliveWriteTimeout: a server WriteTimeout shorter than the
// stream does not cut it (each write sets its own deadline).
func TestEventsOutliveWriteTimeout(t *testing.T) {
	f := NewFakePlant(2, 5)
	pg := New(f, f.Hist, Options{Interval: 50 * time.Millisecond})
	mux := http.NewServeMux()
	pg.Register(mux)
	srv := httptest.NewUnstartedServer(mux)
	srv.Config.WriteTimeout = 200 * time.Millisecond
	srv.Start()
	t.Cleanup(srv.Close)
	t.Cleanup(pg.Close)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	_, ch := openEvents(t, ctx, srv.URL+"/page/events?view=plant", "")
	start := time.Now()
	for time.Since(start) < 1500*time.Millisecond {
		f.Bump()
		next(t, ch)
	}
}
