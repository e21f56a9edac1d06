package statuspage_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
	"github.com/nats-io/nats.go"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/access"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/service"
	"modewatch/cmd/modewatch/internal/statuspage"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/sim"
)

// The browser tests drive Debian's headless chromium. Where it is not
// installed they skip with this hint.
const installHint = "no chromium found: install it with `apt-get update && apt-get install -y chromium` " +
	"(or set MODEWATCH_CHROMIUM to a Chromium binary) to run the status page's browser tests"

func chromium(t *testing.T) string {
	t.Helper()
	if testing.Short() {
		t.Skip("drives a real browser")
	}
	if p := os.Getenv("MODEWATCH_CHROMIUM"); p != "" {
		return p
	}
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	t.Skip(installHint)
	return ""
}

// browser starts headless chromium with a fresh profile and returns a
// context for new tabs.
func browser(t *testing.T, path string) context.Context {
	t.Helper()
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(path), chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU, chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-background-networking", true), chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true), chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.Flag("disable-background-timer-throttling", true), chromedp.Flag("disable-renderer-backgrounding", true),
		chromedp.Flag("force-color-profile", "srgb"), chromedp.Flag("hide-scrollbars", true),
		chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1280, 860),
	}
	actx, cancel := chromedp.NewExecAllocator(context.Background(), opts...)
	t.Cleanup(cancel)
	bctx, bcancel := chromedp.NewContext(actx)
	t.Cleanup(bcancel)
	if err := chromedp.Do(bctx); err != nil { // starts the browser
		t.Skipf("chromium at %s does not start (%v); %s", path, err, installHint)
	}
	return bctx
}

// tab opens a new tab of the browser.
func tab(t *testing.T, bctx context.Context) context.Context {
	t.Helper()
	ctx, cancel := chromedp.NewContext(bctx)
	t.Cleanup(cancel)
	return ctx
}

// artifacts returns the directory test artifacts (screenshots, measured
// figures) are written to: $MODEWATCH_ARTIFACTS, else a directory under
// the system's temporary directory that outlives the test.
func artifacts(t *testing.T) string {
	dir := os.Getenv("MODEWATCH_ARTIFACTS")
	if dir == "" {
		dir = filepath.Join(os.TempDir(), "modewatch-statuspage-artifacts")
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	return dir
}

// screenshot writes the tab's full page as name.png to the artifacts, and
// for the README's views (readme) also to $MODEWATCH_SCREENSHOTS when set.
func screenshot(t *testing.T, ctx context.Context, name string, readme bool) {
	t.Helper()
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		t.Fatalf("screenshot %s: %v", name, err)
	}
	p := filepath.Join(artifacts(t), name+".png")
	if err := os.WriteFile(p, png, 0o644); err != nil {
		t.Fatal(err)
	}
	t.Logf("screenshot: %s (%d bytes)", p, len(png))
	// MODEWATCH_SCREENSHOTS names the folder of the README's screenshots.
	if dir := os.Getenv("MODEWATCH_SCREENSHOTS"); dir != "" && readme {
		if err := os.WriteFile(filepath.Join(dir, name+".png"), smallPNG(t, png), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// smallPNG re-encodes a screenshot with a palette of its 256 most
// frequent colours (the page is flat: greys, a few alarm colours and the
// anti-aliasing between them), each pixel mapped to the nearest, so that
// the README's images stay small.
func smallPNG(t *testing.T, b []byte) []byte {
	t.Helper()
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	count := map[color.RGBA]int{}
	r := img.Bounds()
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			count[color.RGBAModel.Convert(img.At(x, y)).(color.RGBA)]++
		}
	}
	cols := make([]color.RGBA, 0, len(count))
	for c := range count {
		cols = append(cols, c)
	}
	sort.Slice(cols, func(i, j int) bool {
		if count[cols[i]] != count[cols[j]] {
			return count[cols[i]] > count[cols[j]]
		}
		return fmt.Sprint(cols[i]) < fmt.Sprint(cols[j])
	})
	pal := make(color.Palette, 0, 256)
	for _, c := range cols[:min(256, len(cols))] {
		pal = append(pal, c)
	}
	out := image.NewPaletted(r, pal)
	near := map[color.RGBA]uint8{}
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			c := color.RGBAModel.Convert(img.At(x, y)).(color.RGBA)
			i, ok := near[c]
			if !ok {
				i = uint8(pal.Index(c))
				near[c] = i
			}
			out.SetColorIndex(x, y, i)
		}
	}
	var buf bytes.Buffer
	if err := (&png.Encoder{CompressionLevel: png.BestCompression}).Encode(&buf, out); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// poll waits until expr holds in the page; timeout is a hang bound (a
// minute in these tests: the page, the service and the publisher share a
// loaded machine).
func poll(t *testing.T, ctx context.Context, what, expr string, timeout time.Duration) {
	t.Helper()
	if _, err := chromedp.Run(ctx, chromedp.Poll[bool](expr, chromedp.WithPollingInterval(20*time.Millisecond), chromedp.WithPollingTimeout(timeout))); err != nil {
		t.Fatalf("%s: %v", what, err)
	}
}

func eval[T any](t *testing.T, ctx context.Context, expr string) T {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](expr))
	if err != nil {
		t.Fatalf("evaluate %s: %v", expr, err)
	}
	return v
}

// hash moves the page to another view (no reload).
func hash(t *testing.T, ctx context.Context, h string) {
	t.Helper()
	_ = eval[string](t, ctx, fmt.Sprintf("location.hash = %q", h))
}

// login opens the page at path and gives it token through its form.
func login(t *testing.T, ctx context.Context, base, path, token string) {
	t.Helper()
	if err := chromedp.Do(ctx, chromedp.Navigate(base+path),
		chromedp.WaitVisible(chromedp.CSS("#token")),
		chromedp.SendKeys(chromedp.CSS("#token"), token),
		chromedp.Click(chromedp.CSS("#login-go")),
	); err != nil {
		t.Fatalf("login: %v", err)
	}
}

// Tokens the service is configured with (stored hashed): a reader and a
// writer called operator-a, whose name the API records as "by".
const (
	readerToken = "rd-4c1e9a-status-page-test"
	writerToken = "wr-77b0d2-status-page-test"
	writerName  = "operator-a"
)

// demoPlant starts the service on the demo plant (configs/demo.yaml,
// model fitted on its fault-free first day, embedded NATS) with bearer
// tokens for a reader and a writer, and returns the service's status page
// (the same listener as its API) and the scenario whose next hours are to
// be published.
func demoPlant(t *testing.T) (base string, svc *service.Service, sc *sim.Scenario) {
	t.Helper()
	yaml, err := os.ReadFile("../../../../configs/demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	cfg, err := configs.Parse("configs/demo.yaml", yaml)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cfg.HTTP.Listen, cfg.StateDir, cfg.Delivery.SpoolDir = "127.0.0.1:0", dir, ""
	cfg.HTTP.Tokens = []configs.Token{
		{Name: "viewer", Role: configs.RoleRead, Hash: access.HashToken(readerToken)},
		{Name: writerName, Role: configs.RoleWrite, Hash: access.HashToken(writerToken)},
	}
	cfg.Log.Level = "error"
	cfg.ApplyDefaults()
	sc, err = sim.Demo()
	if err != nil {
		t.Fatal(err)
	}
	day1 := testkit.LineProtocol(t, testkit.DemoScenario(t, 24*time.Hour))
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	res, err := pipeline.Replay(context.Background(), pipeline.ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(day1), Fit: true, Log: log})
	if err != nil {
		t.Fatal(err)
	}
	model, err := res.Pipeline.Baseline()
	if err != nil {
		t.Fatal(err)
	}
	cfg.Model.File = filepath.Join(dir, "model.json")
	if err := pipeline.WriteModel(cfg.Model.File, model); err != nil {
		t.Fatal(err)
	}
	svc, err = service.Start(context.Background(), service.Options{Config: cfg, Log: log, Stdout: io.Discard})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
		defer cancel()
		_ = svc.Shutdown(ctx)
	})
	return svc.Info().HTTP, svc, sc
}

// noSideways checks that the page fits the window's width.
func noSideways(t *testing.T, ctx context.Context, what string) {
	t.Helper()
	if w := eval[[]int](t, ctx, `[document.documentElement.scrollWidth, window.innerWidth]`); w[0] > w[1] {
		t.Errorf("%s: the page is %d px wide in a %d px window", what, w[0], w[1])
	}
}

// confirmAction clicks the action button at sel, writes text into the
// confirmation dialog's field and confirms.
func confirmAction(t *testing.T, ctx context.Context, sel, field, text string) {
	t.Helper()
	if err := chromedp.Do(ctx,
		chromedp.WaitVisible(chromedp.CSS(sel)),
		chromedp.Click(chromedp.CSS(sel)),
		chromedp.WaitVisible(chromedp.CSS("#confirm")),
		chromedp.SendKeys(chromedp.CSS(fmt.Sprintf(`#confirm input[name=%q]`, field)), text),
		chromedp.Click(chromedp.CSS("#confirm-ok")),
	); err != nil {
		t.Fatal(err)
	}
}

// relay forwards TCP connections to a target address and can drop every
// connection it holds.
type relay struct {
	ln    net.Listener
	mu    sync.Mutex
	conns []net.Conn
}

func newRelay(t *testing.T, target string) *relay {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	r := &relay{ln: ln}
	t.Cleanup(func() { ln.Close(); r.drop() })
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			u, err := net.Dial("tcp", target)
			if err != nil {
				c.Close()
				continue
			}
			r.mu.Lock()
			r.conns = append(r.conns, c, u)
			r.mu.Unlock()
			go func() { _, _ = io.Copy(u, c); u.Close() }()
			go func() { _, _ = io.Copy(c, u); c.Close() }()
		}
	}()
	return r
}

func (r *relay) addr() string { return r.ln.Addr().String() }

// drop closes every connection relayed so far.
func (r *relay) drop() {
	r.mu.Lock()
	defer r.mu.Unlock()
	for _, c := range r.conns {
		c.Close()
	}
	r.conns = nil
}

func apiJSON(t *testing.T, base, path, token string, v any) {
	t.Helper()
	req, _ := http.NewRequest("GET", base+path, nil)
	req.Header.Set("Authorization", "Bearer "+token)
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	if err := json.NewDecoder(res.Body).Decode(v); err != nil {
		t.Fatalf("GET %s: %v", path, err)
	}
}

// TestBrowserDemo drives the page in headless chromium against the
// service running the demo plant:
//   - the plant view lists every unit the API lists;
//   - a bias injected on steam.boiler1.steam_pressure puts steam at the top
//     with its incident within the update interval (plus the browser's
//     own scheduling) of the incident appearing in /api/alerts;
//   - after the front drops every connection the page resumes its event
//     stream without reloading;
//   - a reader's incidents view has no action buttons, its unit and
//     severity filters hide and show the incident, and the API refuses the
//     reader's acknowledgement;
//   - a writer acknowledges the incident through the confirmation dialog,
//     and the page and /api/alerts show it acknowledged by the writer;
//   - the writer accepts it as the new normal through the page, and the
//     API's record says who did;
//   - the unit view shows the incident's contributors with their reading,
//     expected value and band;
//   - screenshots of the three views and of a narrow screen are written as
//     test artifacts, and the narrow screen does not scroll sideways.
func TestBrowserDemo(t *testing.T) {
	path := chromium(t)
	direct, svc, sc := demoPlant(t)
	// The browser reaches the service through a relay that can drop every
	// connection, as a network failure would.
	rl := newRelay(t, strings.TrimPrefix(direct, "http://"))
	base := "http://" + rl.addr()
	bctx := browser(t, path)

	// The second simulated normal day, fault-free for 40 plant minutes,
	// then a bias of 0.6 bar (12 times the channel's noise,
	// configs/scenario-demo.yaml) on the boiler's steam pressure; 200x
	// sends a 20 s frame every 0.1 s.
	live := sc.Normal()
	live.Start = sc.Start.Add(24 * time.Hour)
	live.Duration = 8 * time.Hour
	const faulty = "steam"
	// For the README's screenshots (MODEWATCH_SCREENSHOTS) the fault comes
	// later, so that the trends show some hours.
	faultAfter := 40 * time.Minute
	if os.Getenv("MODEWATCH_SCREENSHOTS") != "" {
		faultAfter = 3*time.Hour + 20*time.Minute
	}
	live.Episodes = []sim.Episode{{ID: "T1-pressure-bias", Kind: sim.Bias, Start: live.Start.Add(faultAfter),
		End: live.End(), Channels: []string{"steam.boiler1.steam_pressure"}, Size: 0.6}}
	nc, err := nats.Connect(svc.Info().NATS)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	pctx, stop := context.WithCancel(context.Background())
	defer stop()
	go func() { _, _ = live.Live(pctx, nc, "modewatch", 200) }()

	reader := tab(t, bctx)
	login(t, reader, base, "/#/", readerToken)
	var units []struct {
		Name string `json:"name"`
	}
	deadline := time.Now().Add(time.Minute)
	for len(units) < len(sc.Units) && time.Now().Before(deadline) {
		apiJSON(t, base, "/api/units", readerToken, &units)
		time.Sleep(50 * time.Millisecond)
	}
	if len(units) != len(sc.Units) {
		t.Fatalf("the API lists %d units, the demo plant has %d", len(units), len(sc.Units))
	}
	poll(t, reader, "plant view lists every unit", fmt.Sprintf(`document.querySelectorAll("#units .urow[data-unit]").length === %d`, len(units)), time.Minute)
	shown := eval[[]string](t, reader, `[...document.querySelectorAll("#units .urow[data-unit]")].map(r => r.dataset.unit).sort()`)
	for i, u := range units {
		if shown[i] != u.Name {
			t.Errorf("plant view shows %v, the API %v", shown, units)
			break
		}
	}
	_ = eval[bool](t, reader, `(window.loadedOnce = true)`)

	// The fault: wait for its incident in the API, then for the page.
	var id string
	deadline = time.Now().Add(faultAfter/200 + 60*time.Second)
	for id == "" && time.Now().Before(deadline) {
		var open []alerts.Record
		apiJSON(t, base, "/api/alerts", readerToken, &open)
		for _, r := range open {
			if r.Unit == faulty && r.Group == alerts.GroupModel {
				id = r.ID
			}
		}
		if id == "" {
			time.Sleep(20 * time.Millisecond)
		}
	}
	if id == "" {
		t.Fatal("no incident on steam in /api/alerts within a minute of the fault")
	}
	// Within three update intervals, counted in the page's updates (one
	// per interval while the plant changes, as it does here): the update
	// events the page has received when the API shows the incident, and
	// when the page first draws it, marked as the drawing happens (a
	// mutation observer runs right after the event's handler). Counted in
	// wall-clock time instead, a loaded machine (the service, the
	// publisher and chromium on two cores) could stretch it.
	seen := time.Now()
	_ = eval[bool](t, reader, `(() => {
		const shown = () => { const r = document.querySelector("#units .urow[data-unit]"); return !!r && r.dataset.unit === "steam" && !!r.querySelector(".incs .sev"); };
		const mark = () => { if (window.shownAtEvent === undefined && shown()) window.shownAtEvent = Number(document.body.dataset.events || "0"); };
		window.eventsAtAPI = Number(document.body.dataset.events || "0");
		mark();
		new MutationObserver(mark).observe(document.body, { subtree: true, childList: true, attributes: true, characterData: true });
		return true;
	})()`)
	poll(t, reader, "the faulty unit at the top with its incident", `window.shownAtEvent !== undefined`, time.Minute)
	lag := time.Since(seen)
	updates := eval[float64](t, reader, `window.shownAtEvent - window.eventsAtAPI`)
	t.Logf("incident in /api/alerts → steam at the top of the page with it: %v updates later, %s (update interval %s)", updates, lag.Round(time.Millisecond), statuspage.DefaultInterval)
	if updates > 3 {
		t.Errorf("the page showed the incident %v updates after the API, more than three update intervals", updates)
	}
	screenshot(t, reader, "plant", true)

	// Lost connections: the page resumes its stream without reloading.
	before := eval[string](t, reader, `document.body.dataset.events || "0"`)
	rl.drop()
	poll(t, reader, "events again after the connections were dropped",
		fmt.Sprintf(`window.loadedOnce === true && Number(document.body.dataset.events) > %s && document.getElementById("live").dataset.state === "live"`, before),
		time.Minute)

	// The reader: the incident is listed with no action buttons, and the
	// API refuses the reader's acknowledgement.
	hash(t, reader, "#/incidents")
	poll(t, reader, "reader's incidents view", fmt.Sprintf(`!!document.querySelector('tr[data-id=%q]')`, id), time.Minute)
	if n := eval[int](t, reader, `document.querySelectorAll("button[data-act]").length`); n != 0 {
		t.Errorf("the reader sees %d action buttons", n)
	}
	// The filters: another unit or another severity hides the incident.
	for _, f := range [][2]string{{"f-unit", "air"}, {"f-sev", "low"}} {
		_ = eval[bool](t, reader, fmt.Sprintf(`(() => { const s = document.getElementById(%q); s.value = %q; s.dispatchEvent(new Event("change")); return true; })()`, f[0], f[1]))
		poll(t, reader, "filter "+f[0]+" = "+f[1]+" hides the incident", fmt.Sprintf(`!document.querySelector('tr[data-id=%q]')`, id), time.Minute)
		_ = eval[bool](t, reader, fmt.Sprintf(`(() => { const s = document.getElementById(%q); s.value = ""; s.dispatchEvent(new Event("change")); return true; })()`, f[0]))
		poll(t, reader, "filter "+f[0]+" cleared shows the incident", fmt.Sprintf(`!!document.querySelector('tr[data-id=%q]')`, id), time.Minute)
	}
	body := fmt.Sprintf(`{"alert_id":%q,"by":"viewer"}`, id)
	req, _ := http.NewRequest("POST", base+"/api/alerts/ack", strings.NewReader(body))
	req.Header.Set("Authorization", "Bearer "+readerToken)
	if res, err := http.DefaultClient.Do(req); err != nil || res.StatusCode != http.StatusForbidden {
		t.Errorf("reader's acknowledgement: %v %v, want 403", res.StatusCode, err)
	}

	// The writer acknowledges through the page.
	writer := tab(t, bctx)
	login(t, writer, base, "/#/incidents", writerToken)
	ack := fmt.Sprintf(`tr[data-id=%q] button[data-act="ack"]`, id)
	confirmAction(t, writer, ack, "comment", "seen on the local gauge")
	poll(t, writer, "the incident acknowledged by the writer in the page",
		fmt.Sprintf(`(() => { const r = document.querySelector('tr[data-id=%q]'); return !!r && r.dataset.state === "acknowledged" && r.textContent.includes("acknowledged by %s"); })()`, id, writerName),
		time.Minute)
	// The incident's row says what is wrong in the channel's terms.
	poll(t, writer, "the incident's reading against its expected value in the incidents view",
		fmt.Sprintf(`/ reads -?[0-9.]+, expected -?[0-9.]+ ± [0-9.]+$/.test(document.querySelector('tr[data-id=%q] .what')?.textContent || "")`, id), time.Minute)
	screenshot(t, writer, "incidents", true)
	var open []alerts.Record
	apiJSON(t, base, "/api/alerts", readerToken, &open)
	acked := false
	for _, r := range open {
		if r.ID == id && r.Acknowledged != nil && r.Acknowledged.By == writerName {
			acked = true
		}
	}
	if !acked {
		t.Errorf("/api/alerts does not show %s acknowledged by %s", id, writerName)
	}

	// The unit view of the faulty unit, its incident with contributors.
	hash(t, writer, "#/unit/"+faulty)
	poll(t, writer, "unit view with charts and contributors", `document.querySelectorAll(".chart svg").length >= 2 && !!document.querySelector("table.contributors td")`, time.Minute)
	// The contributors carry their reading, expected value and band.
	poll(t, writer, "the top contributor's expected value", `/^-?[0-9]/.test(document.querySelector('table.contributors td[data-k="expected"]')?.textContent || "")`, time.Minute)
	if n := eval[int](t, writer, `document.querySelectorAll('button[data-act="maintenance"]').length`); n != 1 {
		t.Errorf("the writer's unit view has %d maintenance buttons, want 1", n)
	}
	screenshot(t, writer, "unit", true)

	// A narrow screen: no sideways scrolling.
	if err := chromedp.Do(reader, chromedp.EmulateViewport(400, 860)); err != nil {
		t.Fatal(err)
	}
	hash(t, reader, "#/")
	poll(t, reader, "narrow plant view", `document.querySelectorAll("#units .urow[data-unit]").length > 0`, time.Minute)
	noSideways(t, reader, "narrow plant view")
	screenshot(t, reader, "plant-narrow", true)
	hash(t, reader, "#/unit/"+faulty)
	poll(t, reader, "narrow unit view", `document.querySelectorAll(".chart svg").length >= 2`, time.Minute)
	noSideways(t, reader, "narrow unit view")
	if n := eval[int](t, reader, `document.querySelectorAll("button[data-act]").length`); n != 0 {
		t.Errorf("the reader's unit view has %d action buttons", n)
	}
	screenshot(t, reader, "unit-narrow", false)

	// The writer accepts the incident as the new normal: it leaves the
	// open list, and the API's record names who accepted it.
	hash(t, writer, "#/incidents")
	accept := fmt.Sprintf(`tr[data-id=%q] button[data-act="accept"]`, id)
	confirmAction(t, writer, accept, "reason", "new burner setting, approved")
	poll(t, writer, "the accepted incident leaves the open list", fmt.Sprintf(`!document.querySelector('tr[data-id=%q] button[data-act]')`, id), time.Minute)
	var all []alerts.Record
	accepted := false
	for deadline := time.Now().Add(time.Minute); !accepted && time.Now().Before(deadline); time.Sleep(50 * time.Millisecond) {
		apiJSON(t, base, "/api/alerts?all=1", readerToken, &all)
		for _, r := range all {
			if r.ID == id && r.Accepted != nil && r.Accepted.By == writerName {
				accepted = true
			}
		}
	}
	if !accepted {
		t.Errorf("/api/alerts?all=1 does not show %s accepted by %s", id, writerName)
	}
}

// TestBrowserLoad measures, in headless chromium, how long the plant view
// of 50 units with 100 channels each (5,000 channels) takes from the start
// of navigation to the first complete render (the page's
// "modewatch-first-view" mark), and writes the figure as an artifact. It
// checks that every unit is drawn; the time is reported, not asserted.
func TestBrowserLoad(t *testing.T) {
	path := chromium(t)
	f := statuspage.NewFakePlant(50, 100)
	mux := http.NewServeMux()
	pg := statuspage.New(f, f.Hist, statuspage.Options{})
	pg.Register(mux)
	srv := httptest.NewServer(mux)
	t.Cleanup(srv.Close) // after the browser and the streams are gone
	t.Cleanup(pg.Close)
	ctx := tab(t, browser(t, path))
	var ms []float64
	for i := 0; i < 5; i++ {
		if err := chromedp.Do(ctx, chromedp.Navigate(srv.URL+"/?load="+fmt.Sprint(i)+"#/")); err != nil {
			t.Fatal(err)
		}
		poll(t, ctx, "50 units drawn", `document.querySelectorAll("#units .urow[data-unit]").length === 50 && performance.getEntriesByName("modewatch-first-view").length === 1`, time.Minute)
		ms = append(ms, eval[float64](t, ctx, `performance.getEntriesByName("modewatch-first-view")[0].startTime`))
	}
	t.Logf("plant view of 50 units / 5,000 channels, navigation start to first complete render: %.0f ms (loads: %.0f)", median(ms), ms)
	p := filepath.Join(artifacts(t), "load-50x5000.txt")
	_ = os.WriteFile(p, []byte(fmt.Sprintf("plant view, 50 units, 5000 channels, headless chromium: navigation start to first render, median of %d loads: %.0f ms (%.0f)\n", len(ms), median(ms), ms)), 0o644)
	screenshot(t, ctx, "load-50x5000", false)
}

func median(x []float64) float64 {
	s := append([]float64(nil), x...)
	for i := range s {
		for j := i + 1; j < len(s); j++ {
			if s[j] < s[i] {
				s[i], s[j] = s[j], s[i]
			}
		}
	}
	return s[len(s)/2]
}
