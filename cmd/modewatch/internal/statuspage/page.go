// Package statuspage is the live status page of the modewatch service: a
// plant view (every unit, abnormal first, each statistic against its limit
// with its trend, open incidents, data-quality problems), a unit view
// (statistics over a chosen window with incident spans, modes as loadings,
// the contributors of an open incident) and an incidents view (filters and
// the operator actions, which call the service's /api endpoints). Every
// asset is embedded; updates are pushed as server-sent events at most once
// per interval per client to a bounded number of clients.
//
// The page reads the same views as /api/* through a [Source]; access
// control is injected ([Options].Read wraps every handler that returns
// plant data), so the page and the API share one authentication.
//
// modewatch is advisory: every page carries the caution.
package statuspage

import (
	"embed"
	"encoding/json"
	"io/fs"
	"net/http"
	"sort"
	"strings"
	"sync"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
)

//go:embed assets
var assets embed.FS

// Source is what the page shows: the units as /api/units/{unit} returns
// them, the open incidents (/api/alerts) and the recent ones, open or
// closed (/api/alerts?all=1).
type Source interface {
	Views() []pipeline.UnitView
	Open() []alerts.Record
	Records() []alerts.Record
}

// Identity says who a request is and whether it may use the write
// endpoints (acknowledge, shelve, maintenance, accept-as-normal).
type Identity struct {
	Name     string `json:"name"`
	CanWrite bool   `json:"can_write"`
	// Auth is true when the service authenticates requests: the page then
	// sends the token it was given with every request.
	Auth bool `json:"auth"`
}

// Defaults of Options.
const (
	DefaultInterval   = time.Second
	DefaultMaxClients = 32
	// DefaultTrendWindow is the span of the plant view's small trends,
	// drawn in DefaultTrendPoints points.
	DefaultTrendWindow = 4 * time.Hour
	DefaultTrendPoints = 48
	// maxListed bounds each channel list of the plant view (the counts
	// are always complete).
	maxListed = 12
)

// DefaultCaution is printed on every page when Options.Caution is empty.
const DefaultCaution = "modewatch is advisory: it never acts on the plant and is not a safety system. " +
	"Safety decisions follow site procedures, local codes and licensed practice."

// Options configure a Page. The zero value serves without access
// control.
type Options struct {
	// Read wraps every handler that returns plant data with the read
	// permission of the API; nil: no check.
	Read func(http.Handler) http.Handler
	// Identify says who a request (already through Read) is; nil: an
	// anonymous writer without authentication (the API is open too).
	Identify func(*http.Request) Identity
	// Ops lists the operator commands the API accepts (alerts.OpAck, …);
	// the page offers an action only when its command is listed.
	Ops []string
	// Severities are the severity names, ascending (default: the alarm
	// engine's default bands).
	Severities []string
	// Interval is the shortest time between two updates to one client
	// (default DefaultInterval); MaxClients bounds the open event streams
	// (default DefaultMaxClients); more are refused with 503.
	Interval   time.Duration
	MaxClients int
	// Caution is printed at the top and foot of every page (default
	// DefaultCaution).
	Caution string
}

// Page serves the status page. Create it with New.
type Page struct {
	src  Source
	hist *History
	opt  Options
	sem  chan struct{}

	mu      sync.Mutex
	base    *base
	clients int
	refused uint64

	done      chan struct{}
	closeOnce sync.Once
}

// Close ends every open event stream and refuses new ones, so that the
// HTTP server's Shutdown is not held up by streams that never go idle
// (register it with http.Server.RegisterOnShutdown). It is idempotent.
func (p *Page) Close() { p.closeOnce.Do(func() { close(p.done) }) }

// New returns the page over src, drawing trends from hist.
func New(src Source, hist *History, opt Options) *Page {
	if opt.Interval <= 0 {
		opt.Interval = DefaultInterval
	}
	if opt.MaxClients <= 0 {
		opt.MaxClients = DefaultMaxClients
	}
	if len(opt.Severities) == 0 {
		for _, b := range alerts.DefaultSeverity() {
			opt.Severities = append(opt.Severities, b.Name)
		}
	}
	if opt.Caution == "" {
		opt.Caution = DefaultCaution
	}
	if opt.Read == nil {
		opt.Read = func(h http.Handler) http.Handler { return h }
	}
	if opt.Identify == nil {
		opt.Identify = func(*http.Request) Identity { return Identity{CanWrite: true} }
	}
	return &Page{src: src, hist: hist, opt: opt, sem: make(chan struct{}, opt.MaxClients), done: make(chan struct{})}
}

// Register adds the page's routes to mux:
//
//	GET /                         the page (no plant data; it asks for a token when the service wants one)
//	GET /page/assets/{file}       its style sheet and script
//	GET /page/me                  who the request is and what it may do        (read)
//	GET /page/data/plant          the plant view                               (read)
//	GET /page/data/unit/{unit}    the unit view; ?window=1h|8h|24h             (read)
//	GET /page/data/incidents      open and recent incidents                    (read)
//	GET /page/events              server-sent events of the view named by ?view=plant|unit|incidents (read)
func (p *Page) Register(mux *http.ServeMux) {
	sub, _ := fs.Sub(assets, "assets")
	mux.HandleFunc("GET /{$}", p.index)
	mux.Handle("GET /page/assets/", http.StripPrefix("/page/assets/", cacheFor(http.FileServerFS(sub))))
	mux.Handle("GET /page/me", p.opt.Read(http.HandlerFunc(p.me)))
	mux.Handle("GET /page/data/plant", p.opt.Read(http.HandlerFunc(p.plantData)))
	mux.Handle("GET /page/data/unit/{unit}", p.opt.Read(http.HandlerFunc(p.unitData)))
	mux.Handle("GET /page/data/incidents", p.opt.Read(http.HandlerFunc(p.incidentsData)))
	mux.Handle("GET /page/events", p.opt.Read(http.HandlerFunc(p.events)))
}

func cacheFor(h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Cache-Control", "public, max-age=300")
		h.ServeHTTP(w, r)
	})
}

func (p *Page) index(w http.ResponseWriter, r *http.Request) {
	b, err := assets.ReadFile("assets/index.html")
	if err != nil {
		http.Error(w, err.Error(), http.StatusInternalServerError)
		return
	}
	html := strings.ReplaceAll(string(b), "{{caution}}", htmlEscape(p.opt.Caution))
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Cache-Control", "no-cache")
	w.Header().Set("Content-Security-Policy", "default-src 'self'; style-src 'self' 'unsafe-inline'; script-src 'self'; img-src 'self' data:")
	_, _ = w.Write([]byte(html))
}

func htmlEscape(s string) string {
	return strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&quot;").Replace(s)
}

func (p *Page) me(w http.ResponseWriter, r *http.Request) {
	id := p.opt.Identify(r)
	ops := p.opt.Ops
	if !id.CanWrite {
		ops = []string{}
	}
	writeJSON(w, map[string]any{"identity": id, "ops": ops, "severities": p.opt.Severities,
		"interval_s": p.opt.Interval.Seconds(), "caution": p.opt.Caution})
}

// base is one consistent read of the source, shared by every client for
// one interval.
type base struct {
	at      time.Time
	views   []pipeline.UnitView
	open    []alerts.Record
	records []alerts.Record
}

// snapshot returns the source read at most one interval ago, so that the
// source is read at most once per interval however many clients there are.
func (p *Page) snapshot() *base {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.base != nil && time.Since(p.base.at) < p.opt.Interval {
		return p.base
	}
	p.base = &base{at: time.Now(), views: p.src.Views(), open: p.src.Open(), records: p.src.Records()}
	return p.base
}

func writeJSON(w http.ResponseWriter, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	_ = json.NewEncoder(w).Encode(v)
}

func (p *Page) plantData(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, p.plant(p.snapshot()))
}

func (p *Page) unitData(w http.ResponseWriter, r *http.Request) {
	u, ok := p.unit(p.snapshot(), r.PathValue("unit"), window(r.URL.Query().Get("window")))
	if !ok {
		w.Header().Set("Content-Type", "application/json")
		w.WriteHeader(http.StatusNotFound)
		_ = json.NewEncoder(w).Encode(map[string]string{"error": "no unit " + r.PathValue("unit")})
		return
	}
	writeJSON(w, u)
}

func (p *Page) incidentsData(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, p.incidents(p.snapshot()))
}

// window parses the unit view's window: 1h, 8h (a shift) or 24h.
func window(s string) time.Duration {
	switch s {
	case "8h":
		return 8 * time.Hour
	case "24h":
		return 24 * time.Hour
	}
	return time.Hour
}

// IncidentBrief is an open incident as the plant view lists it.
type IncidentBrief struct {
	ID        string   `json:"id"`
	Group     string   `json:"group"`
	Severity  string   `json:"severity"`
	State     string   `json:"state"`
	Ratio     float64  `json:"ratio"`
	Statistic string   `json:"statistic"`
	Top       []string `json:"top"`
	// What says what is wrong in the channel's terms, as the record's text
	// does (alerts.RecordContributor.Expectation of the first contributor,
	// alerts.RecordQuality.Describe); empty when the record carries
	// neither a reading nor a quality finding.
	What    string `json:"what,omitempty"`
	Acked   bool   `json:"acked"`
	Shelved bool   `json:"shelved"`
	Start   string `json:"start"`
}

// Names is a channel list: its full count and at most a dozen names.
type Names struct {
	Count int      `json:"count"`
	Names []string `json:"names"`
}

func names(s []string) Names {
	return Names{Count: len(s), Names: s[:min(len(s), maxListed)]}
}

// UnitRow is one unit of the plant view.
type UnitRow struct {
	Name        string              `json:"name"`
	ModelState  string              `json:"model_state"`
	Operating   string              `json:"operating_state,omitempty"`
	Maintenance bool                `json:"maintenance"`
	Error       string              `json:"error,omitempty"`
	Channels    int                 `json:"channels"`
	Frames      uint64              `json:"frames"`
	Time        *time.Time          `json:"time"`
	Ratio       map[string]*float64 `json:"ratio"`
	Trend       *Trend              `json:"trend"`
	Incidents   []IncidentBrief     `json:"incidents"`
	Missing     Names               `json:"missing"`
	Excluded    Names               `json:"excluded"`
	Warming     Names               `json:"warming"`
	NotModelled Names               `json:"not_modelled"`
	StepErrors  uint64              `json:"step_errors"`
	// Rank orders the rows: abnormal units first (incidents by severity,
	// then statistics over their limits, then data-quality problems).
	Rank float64 `json:"rank"`
}

// Plant is the plant view.
type Plant struct {
	Time  time.Time `json:"time"` // latest frame time of any unit
	Units []UnitRow `json:"units"`
	Open  int       `json:"open"`
}

func (p *Page) sevRank(name string) int {
	for i, s := range p.opt.Severities {
		if s == name {
			return i + 1
		}
	}
	return 1
}

func brief(r *alerts.Record) IncidentBrief {
	b := IncidentBrief{ID: r.ID, Group: r.Group, Severity: r.Severity, State: r.State, Ratio: r.Peak.Ratio,
		Statistic: r.Peak.Statistic, Acked: r.Acknowledged != nil, Shelved: r.Shelved != nil,
		Start: r.Start.UTC().Format(time.RFC3339), Top: []string{}}
	for _, c := range r.Contributors {
		if len(b.Top) == 3 {
			break
		}
		b.Top = append(b.Top, c.Channel)
	}
	if r.Quality != nil {
		b.Top = append(b.Top, r.Quality.Channel)
		b.What = r.Quality.Describe()
	} else if len(r.Contributors) > 0 && r.Contributors[0].Reading.Known() {
		b.What = r.Contributors[0].Expectation()
	}
	return b
}

func ratioOf(v, lim *float64) *float64 {
	if v == nil || lim == nil || !(*lim > 0) {
		return nil
	}
	x := *v / *lim
	return &x
}

func (p *Page) plant(b *base) Plant {
	out := Plant{Units: make([]UnitRow, 0, len(b.views))}
	byUnit := map[string][]IncidentBrief{}
	sev := map[string]int{}
	for i := range b.open {
		r := &b.open[i]
		byUnit[r.Unit] = append(byUnit[r.Unit], brief(r))
		sev[r.Unit] = max(sev[r.Unit], p.sevRank(r.Severity))
	}
	out.Open = len(b.open)
	for i := range b.views {
		v := &b.views[i]
		row := UnitRow{Name: v.Name, ModelState: v.ModelState, Operating: v.State, Maintenance: v.InMaintenance, Error: v.Error,
			Channels: len(v.Channels), Frames: v.Frames, StepErrors: v.StepErrors, Ratio: map[string]*float64{},
			Incidents: byUnit[v.Name], NotModelled: names(v.NotModelled)}
		if row.Incidents == nil {
			row.Incidents = []IncidentBrief{}
		}
		worst := 0.0
		if s := v.Latest; s != nil {
			t := s.Time
			row.Time = &t
			if t.After(out.Time) {
				out.Time = t
			}
			row.Ratio["t2"] = ratioOf(s.T2, s.T2Limit)
			row.Ratio["spe"] = ratioOf(s.SPE, s.SPELimit)
			row.Ratio["phi"] = ratioOf(s.Phi, s.PhiLimit)
			for _, r := range row.Ratio {
				if r != nil {
					worst = max(worst, *r)
				}
			}
			row.Missing, row.Excluded, row.Warming = names(s.Missing), names(s.Excluded), names(s.Warming)
			if tr, ok := p.hist.Trend(v.Name, t, DefaultTrendWindow, DefaultTrendPoints); ok {
				row.Trend = &tr
			}
		}
		// Rank: severity of the worst open incident (×100), then the
		// worst ratio over 1, then data quality.
		row.Rank = float64(sev[v.Name]) * 100
		if worst > 1 {
			row.Rank += 10 + min(worst, 80)
		}
		if row.Missing.Count+row.Excluded.Count > 0 || v.Error != "" || v.StepErrors > 0 {
			row.Rank += 5
		}
		row.Rank += min(worst, 1)
		out.Units = append(out.Units, row)
	}
	sort.SliceStable(out.Units, func(i, j int) bool {
		if out.Units[i].Rank != out.Units[j].Rank {
			return out.Units[i].Rank > out.Units[j].Rank
		}
		return out.Units[i].Name < out.Units[j].Name
	})
	return out
}

// UnitDetail is the unit view.
type UnitDetail struct {
	Unit    pipeline.UnitView `json:"unit"`
	Trend   Trend             `json:"trend"`
	Window  string            `json:"window"`
	Open    []alerts.Record   `json:"open"`
	Records []alerts.Record   `json:"records"` // recent incidents of the unit, newest first (at most 50)
}

func (p *Page) unit(b *base, name string, win time.Duration) (UnitDetail, bool) {
	var d UnitDetail
	found := false
	for i := range b.views {
		if b.views[i].Name == name {
			d.Unit, found = b.views[i], true
		}
	}
	if !found {
		return d, false
	}
	end := time.Now()
	if d.Unit.Latest != nil && !d.Unit.Latest.Time.IsZero() {
		end = d.Unit.Latest.Time
	}
	d.Window = win.String()
	d.Trend, _ = p.hist.Trend(name, end, win, 720)
	d.Open, d.Records = []alerts.Record{}, []alerts.Record{}
	for _, r := range b.open {
		if r.Unit == name {
			d.Open = append(d.Open, r)
		}
	}
	for i := len(b.records) - 1; i >= 0 && len(d.Records) < 50; i-- {
		if b.records[i].Unit == name {
			d.Records = append(d.Records, b.records[i])
		}
	}
	return d, true
}

// Incidents is the incidents view: open incidents and the recent ones
// (open or closed), newest first.
type Incidents struct {
	Time   time.Time       `json:"time"` // latest frame time of any unit
	Units  []string        `json:"units"`
	Open   []alerts.Record `json:"open"`
	Recent []alerts.Record `json:"recent"`
}

func (p *Page) incidents(b *base) Incidents {
	out := Incidents{Units: make([]string, 0, len(b.views)), Open: append([]alerts.Record{}, b.open...), Recent: []alerts.Record{}}
	for i := range b.views {
		out.Units = append(out.Units, b.views[i].Name)
		if l := b.views[i].Latest; l != nil && l.Time.After(out.Time) {
			out.Time = l.Time
		}
	}
	open := map[string]bool{}
	for _, r := range b.open {
		open[r.ID] = true
	}
	for i := len(b.records) - 1; i >= 0 && len(out.Recent) < 200; i-- {
		if !open[b.records[i].ID] {
			out.Recent = append(out.Recent, b.records[i])
		}
	}
	sort.SliceStable(out.Open, func(i, j int) bool { return out.Open[i].Start.After(out.Open[j].Start) })
	return out
}
