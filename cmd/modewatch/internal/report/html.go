package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"html/template"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/store"
)

// Alert is one alert of the replay as the report shows it.
type Alert struct {
	ID        string
	Unit      string
	Start     time.Time
	End       *time.Time // nil: still active at the end of the replay
	Severity  string
	Statistic string  // statistic of the peak ("t2", "spe", "phi") or the data-quality kind
	Ratio     float64 // peak value over its limit
	Top       []string
	// Expected says what the leading channel reads and what the other
	// channels imply, at the frame of its largest contribution ("p.flow
	// reads 71.2, expected 64.0 ± 1.1", alerts.RecordContributor.Expectation),
	// or a level shift's size (alerts.RecordQuality.Describe); "" when
	// unknown.
	Expected string
}

// Input is what a report shows.
type Input struct {
	Title  string
	Inputs []string
	// Summary is the replay's --json object; its scalar fields make the
	// summary table, labelled, rounded and grouped by meaning, and the
	// object itself is one click away on the page.
	Summary any
	Units   []pipeline.UnitView
	Alerts  []Alert
	// Episodes and Metrics come from a truth file (optional); Grace is
	// the grace period of the false-alert count.
	Episodes  []evaluate.Episode
	Metrics   *evaluate.Metrics
	Grace     time.Duration
	Collector *Collector
	Generated time.Time
	// MaxAlertRows bounds the alert table (0: 1000); the page says how
	// many were left out.
	MaxAlertRows int
}

// Advisory is the caution printed on every report.
const Advisory = "modewatch is advisory: it never acts on the plant. Alerts are prompts to look, not instructions; safety decisions follow site procedures, local codes and licensed practice."

// ChartDir is the sub-directory of the report holding the SVG charts.
const ChartDir = "charts"

// Write writes dir/index.html and dir/charts/*.svg and returns the path of
// index.html. Files are written atomically; other files in dir are left
// alone.
func Write(dir string, in *Input) (string, error) {
	if err := os.MkdirAll(filepath.Join(dir, ChartDir), 0o755); err != nil {
		return "", fmt.Errorf("report: %w", err)
	}
	page := pageData{Title: in.Title, Advisory: Advisory, Inputs: in.Inputs, Generated: in.Generated.UTC().Format(time.RFC3339)}
	if page.Title == "" {
		page.Title = "modewatch replay report"
	}
	flat, err := flatten(in.Summary)
	if err != nil {
		return "", err
	}
	page.Summary = groupSummary(flat)
	if page.SummaryJSON, err = rawJSON(in.Summary); err != nil {
		return "", err
	}
	if m := in.Metrics; m != nil {
		page.Truth = true
		page.Metrics = metricRows(m, in.Grace)
		page.Episodes = episodeRows(in.Episodes, m)
	}
	maxRows := in.MaxAlertRows
	if maxRows <= 0 {
		maxRows = 1000
	}
	page.Alerts, page.AlertsLeftOut = alertRows(in, maxRows)

	var series map[string]*series
	if in.Collector != nil {
		series = in.Collector.byName
	}
	written := 0
	put := func(name string, b []byte) (string, error) {
		rel := ChartDir + "/" + name
		if err := store.WriteFile(filepath.Join(dir, ChartDir, name), b, 0o644); err != nil {
			return "", fmt.Errorf("report: %w", err)
		}
		written++
		return rel, nil
	}
	for k, uv := range in.Units {
		u := unitSection{Name: uv.Name, Anchor: fmt.Sprintf("unit-%d", k), State: uv.ModelState, Channels: len(uv.Channels), Frames: uv.Frames, Error: uv.Error}
		base := fmt.Sprintf("%02d-%s", k, safeName(uv.Name))
		s := series[uv.Name]
		if s != nil {
			u.PerBucket = s.per
			alerts, episodes := unitSpans(in, uv, s)
			for st := 0; st < nStats; st++ {
				b, err := statChart(s, st, alerts, episodes)
				if err != nil {
					return "", fmt.Errorf("report: unit %s %s chart: %w", uv.Name, statNames[st], err)
				}
				if b == nil {
					continue
				}
				rel, err := put(base+"-"+statFiles[st]+".svg", b)
				if err != nil {
					return "", err
				}
				u.Stats = append(u.Stats, chart{Src: rel, Alt: fmt.Sprintf("%s of unit %s over time against its control limit", statNames[st], uv.Name)})
			}
			b, names, err := contribChart(s, 240)
			if err != nil {
				return "", fmt.Errorf("report: unit %s contribution chart: %w", uv.Name, err)
			}
			if b != nil {
				rel, err := put(base+"-contributions.svg", b)
				if err != nil {
					return "", err
				}
				u.Heat = &chart{Src: rel, Alt: "contribution heat map of " + strings.Join(names, ", ")}
			}
		}
		for _, m := range uv.Modes {
			b, err := loadingsChart(uv.Name, m)
			if err != nil {
				return "", fmt.Errorf("report: unit %s mode %d: %w", uv.Name, m.ID, err)
			}
			if b == nil {
				continue
			}
			rel, err := put(fmt.Sprintf("%s-mode-%d.svg", base, m.ID), b)
			if err != nil {
				return "", err
			}
			u.Modes = append(u.Modes, chart{Src: rel, Alt: fmt.Sprintf("loadings of mode %d of unit %s: %s", m.ID, uv.Name, strings.Join(m.Channels, ", "))})
		}
		u.OpState = uv.State
		for si, st := range uv.States {
			ss := stateSection{Label: st.Label, Current: st.Current, Frames: st.Frames}
			for _, m := range st.Modes {
				b, err := loadingsChart(uv.Name, m)
				if err != nil {
					return "", fmt.Errorf("report: unit %s state %s mode %d: %w", uv.Name, st.Label, m.ID, err)
				}
				if b == nil {
					continue
				}
				rel, err := put(fmt.Sprintf("%s-state-%d-mode-%d.svg", base, si, m.ID), b)
				if err != nil {
					return "", err
				}
				ss.Modes = append(ss.Modes, chart{Src: rel, Alt: fmt.Sprintf("loadings of mode %d of unit %s in state %s: %s", m.ID, uv.Name, st.Label, strings.Join(m.Channels, ", "))})
			}
			u.OpStates = append(u.OpStates, ss)
		}
		page.Units = append(page.Units, u)
	}
	var b bytes.Buffer
	if err := pageTemplate.Execute(&b, page); err != nil {
		return "", fmt.Errorf("report: %w", err)
	}
	index := filepath.Join(dir, "index.html")
	if err := store.WriteFile(index, b.Bytes(), 0o644); err != nil {
		return "", fmt.Errorf("report: %w", err)
	}
	return index, nil
}

// safeName keeps letters, digits, '-' and '_' of a unit name for a file
// name.
func safeName(s string) string {
	var b strings.Builder
	for _, r := range s {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '-', r == '_':
			b.WriteRune(r)
		default:
			b.WriteByte('_')
		}
	}
	if b.Len() == 0 {
		return "unit"
	}
	return b.String()
}

// unitSpans returns the alert spans of the unit and the episodes touching
// it (an episode naming one of its channels, or naming none).
func unitSpans(in *Input, uv pipeline.UnitView, s *series) (alerts, episodes []span) {
	end := float64(s.last) / 1e9
	for _, a := range in.Alerts {
		if a.Unit != uv.Name {
			continue
		}
		to := end
		if a.End != nil {
			to = unixSeconds(*a.End)
		}
		alerts = append(alerts, span{from: unixSeconds(a.Start), to: to})
	}
	mine := map[string]bool{}
	for _, c := range uv.Channels {
		mine[c] = true
	}
	for _, e := range in.Episodes {
		hit := len(e.Channels) == 0
		for _, c := range e.Channels {
			if mine[c] || strings.HasPrefix(c, uv.Name+".") {
				hit = true
			}
		}
		if hit {
			episodes = append(episodes, span{from: unixSeconds(e.Start), to: unixSeconds(e.End), label: e.ID})
		}
	}
	return alerts, episodes
}

type pageData struct {
	Title, Advisory, Generated string
	Inputs                     []string
	Summary                    []summaryGroup
	SummaryJSON                string // replay --json, indented
	Truth                      bool
	Metrics                    []kv
	Episodes                   []episodeRow
	Alerts                     []alertRow
	AlertsLeftOut              int
	Units                      []unitSection
}

type kv struct{ Key, Value string }

type chart struct{ Src, Alt string }

type unitSection struct {
	Name, Anchor, State, Error string
	Channels                   int
	Frames                     uint64
	PerBucket                  int
	Stats, Modes               []chart
	Heat                       *chart
	// OpState is the current operating state and OpStates each state's
	// modes (units with a state channel).
	OpState  string
	OpStates []stateSection
}

type stateSection struct {
	Label   string
	Current bool
	Frames  uint64
	Modes   []chart
}

type episodeRow struct {
	ID, Kind, Start, End, Channels, Alert, Delay string
	Isolated                                     bool
	Detected                                     bool
}

type alertRow struct {
	Start, End, Unit, Severity, Statistic, Ratio, Top, Expected, Match string
	False                                                              bool
}

// flatten turns a JSON-marshallable value into sorted dotted key/value
// rows of its scalars; arrays of objects (units, modes) are left out (the
// page shows them in their own sections), arrays of scalars are joined.
func flatten(v any) ([]kv, error) {
	if v == nil {
		return nil, nil
	}
	b, err := json.Marshal(v)
	if err != nil {
		return nil, fmt.Errorf("report: summary: %w", err)
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.UseNumber()
	var m any
	if err := dec.Decode(&m); err != nil {
		return nil, fmt.Errorf("report: summary: %w", err)
	}
	var out []kv
	var walk func(prefix string, v any)
	walk = func(prefix string, v any) {
		switch x := v.(type) {
		case map[string]any:
			keys := make([]string, 0, len(x))
			for k := range x {
				keys = append(keys, k)
			}
			sort.Strings(keys)
			for _, k := range keys {
				p := k
				if prefix != "" {
					p = prefix + "." + k
				}
				walk(p, x[k])
			}
		case []any:
			var parts []string
			for _, e := range x {
				switch e.(type) {
				case map[string]any, []any:
					return
				}
				parts = append(parts, fmt.Sprint(e))
			}
			out = append(out, kv{prefix, strings.Join(parts, ", ")})
		case nil:
			out = append(out, kv{prefix, "–"})
		default:
			out = append(out, kv{prefix, fmt.Sprint(x)})
		}
	}
	walk("", m)
	return out, nil
}

func fmtDelay(p *float64) string {
	if p == nil {
		return "–"
	}
	return time.Duration(*p * float64(time.Second)).Round(time.Second).String()
}

func fmtFloat(p *float64, prec int) string {
	if p == nil {
		return "–"
	}
	return strconv.FormatFloat(*p, 'f', prec, 64)
}

func metricRows(m *evaluate.Metrics, grace time.Duration) []kv {
	rows := []kv{
		{"episodes", strconv.Itoa(m.Episodes)},
		{"detected", strconv.Itoa(m.Detected)},
		{"detection rate", fmtFloat(m.DetectionRate, 3)},
		{"median delay", fmtDelay(m.MedianDelayS)},
		{"false alerts", fmt.Sprintf("%d (starting outside every episode of their own unit extended by %s)", m.FalseAlerts, grace)},
		{"false alerts per day", fmtFloat(m.FalseAlertsPerDay, 2)},
		{"isolated in the top 3", strconv.Itoa(m.IsolatedTop3)},
	}
	for _, u := range m.Units {
		rows = append(rows, kv{"unit " + u.Unit, fmt.Sprintf("%d alert(s), %d false; alert open %s%% of normal time; longest alert %s",
			u.Alerts, u.FalseAlerts, fmtPercent(u.AlertOpenShareNormal), fmtDelay(&u.LongestOpenAlertS))})
	}
	return rows
}

func fmtPercent(p *float64) string {
	if p == nil {
		return "–"
	}
	return strconv.FormatFloat(100**p, 'f', 1, 64)
}

func episodeRows(eps []evaluate.Episode, m *evaluate.Metrics) []episodeRow {
	match := map[string]evaluate.Match{}
	for _, x := range m.Matches {
		match[x.Episode] = x
	}
	var out []episodeRow
	for _, e := range eps {
		x := match[e.ID]
		out = append(out, episodeRow{
			ID: e.ID, Kind: e.Kind, Start: e.Start.UTC().Format(time.RFC3339), End: e.End.UTC().Format(time.RFC3339),
			Channels: strings.Join(e.Channels, ", "), Alert: x.Alert, Delay: fmtDelay(x.DelayS),
			Isolated: x.Isolated, Detected: x.Alert != "",
		})
	}
	return out
}

// alertRows lists the alerts by start, with the episode each one matched:
// "detects E" for the first alert inside episode E (the one the metrics
// count), "inside E" for a later one, "near E" within the grace period,
// "false" otherwise.
func alertRows(in *Input, maxRows int) ([]alertRow, int) {
	first := map[string][]string{}
	if in.Metrics != nil {
		for _, x := range in.Metrics.Matches {
			if x.Alert != "" {
				first[x.Alert] = append(first[x.Alert], x.Episode)
			}
		}
	}
	alerts := append([]Alert(nil), in.Alerts...)
	sort.SliceStable(alerts, func(i, j int) bool { return alerts[i].Start.Before(alerts[j].Start) })
	var out []alertRow
	for i, a := range alerts {
		if i == maxRows {
			return out, len(alerts) - maxRows
		}
		r := alertRow{Start: a.Start.UTC().Format(time.RFC3339), End: "active at the end", Unit: a.Unit, Severity: a.Severity,
			Statistic: a.Statistic, Top: strings.Join(a.Top, ", "), Expected: a.Expected}
		if a.End != nil {
			r.End = a.End.UTC().Format(time.RFC3339)
		}
		if !math.IsNaN(a.Ratio) && a.Ratio > 0 {
			r.Ratio = strconv.FormatFloat(a.Ratio, 'f', 1, 64)
		}
		if in.Metrics != nil {
			var parts []string
			if eps := first[a.ID]; len(eps) > 0 {
				parts = append(parts, "detects "+strings.Join(eps, ", "))
			}
			var inside, near []string
			for _, e := range in.Episodes {
				if !a.Start.Before(e.Start) && !a.Start.After(e.End) {
					if !contains(first[a.ID], e.ID) {
						inside = append(inside, e.ID)
					}
				} else if !a.Start.Before(e.Start.Add(-in.Grace)) && !a.Start.After(e.End.Add(in.Grace)) {
					near = append(near, e.ID)
				}
			}
			if len(inside) > 0 {
				parts = append(parts, "inside "+strings.Join(inside, ", "))
			}
			if len(near) > 0 {
				parts = append(parts, "near "+strings.Join(near, ", ")+" (grace)")
			}
			if len(parts) == 0 {
				r.False = true
				parts = append(parts, "false alert")
			}
			r.Match = strings.Join(parts, "; ")
		}
		out = append(out, r)
	}
	return out, 0
}

func contains(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// pageTemplate is the report page. It is XHTML-compatible HTML5 (every
// element closed), so that it parses as XML too.
var pageTemplate = template.Must(template.New("page").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8"/>
<meta name="viewport" content="width=device-width, initial-scale=1"/>
<title>{{.Title}}</title>
<style>
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #2b333d; background: #fbfaf7; margin: 0; }
header { background: #2b333d; color: #f6f3ec; padding: 1.2em 2em; }
header h1 { margin: 0 0 .3em 0; font-size: 1.5em; font-weight: 600; }
header p { margin: .2em 0; font-size: .9em; }
main { padding: 1em 2em 3em 2em; max-width: 1200px; }
h2 { border-bottom: 2px solid #d8cfbf; padding-bottom: .2em; margin-top: 1.8em; font-weight: 600; }
h3 { margin-top: 1.4em; font-weight: 600; }
.advisory { background: #f3ead8; border-left: 5px solid #a33b20; padding: .7em 1em; margin: 1em 0; }
table { border-collapse: collapse; margin: .6em 0; font-size: .88em; }
th, td { border: 1px solid #ddd5c6; padding: .25em .6em; text-align: left; vertical-align: top; }
th { background: #efe9dd; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
tr.false td { background: #fbefe6; }
tr.missed td { background: #fbefe6; }
.charts img { display: block; max-width: 100%; margin: .6em 0; background: #fff; border: 1px solid #e6dfd2; }
.modes { display: flex; flex-wrap: wrap; gap: .6em; }
.modes img { max-width: 48%; background: #fff; border: 1px solid #e6dfd2; }
.note { color: #5c636b; font-size: .88em; }
nav a { color: #f6f3ec; margin-right: 1em; }
.key { font-size: .85em; color: #5c636b; }
.sw { display: inline-block; width: 1.6em; height: .8em; vertical-align: middle; margin: 0 .35em 0 1em; }
.sw.band { background: rgba(90, 120, 150, .44); }
.sw.line { height: 0; border-top: 2px solid #334e68; }
.sw.limit { height: 0; border-top: 2px dashed #a33b20; }
.sw.alert { background: rgba(224, 162, 58, .31); }
.sw.episode { background: rgba(91, 140, 110, .22); }
</style>
</head>
<body>
<header>
<h1>{{.Title}}</h1>
<p>Inputs: {{range $i, $f := .Inputs}}{{if $i}}, {{end}}{{$f}}{{end}}. Written {{.Generated}}.</p>
<nav><a href="#summary">Summary</a>{{if .Truth}}<a href="#episodes">Episodes</a>{{end}}<a href="#alerts">Alerts</a>{{range .Units}}<a href="#{{.Anchor}}">{{.Name}}</a>{{end}}</nav>
</header>
<main>
<p class="advisory"><strong>Advisory.</strong> {{.Advisory}}</p>

<h2 id="summary">Summary</h2>
<table>
{{range .Summary}}<tr><th colspan="2">{{.Title}}</th></tr>
{{range .Rows}}<tr><td>{{.Key}}</td><td class="num">{{.Value}}</td></tr>
{{end}}{{end}}</table>
{{if .SummaryJSON}}<details><summary>The same figures as <code>modewatch replay --json</code> writes them</summary>
<pre>{{.SummaryJSON}}</pre>
</details>{{end}}
{{if .Units}}<table>
<tr><th>unit</th><th>channels</th><th>frames</th><th>model state</th><th>notes</th></tr>
{{range .Units}}<tr><td><a href="#{{.Anchor}}">{{.Name}}</a></td><td class="num">{{.Channels}}</td><td class="num">{{.Frames}}</td><td>{{.State}}</td><td>{{.Error}}</td></tr>
{{end}}</table>{{end}}

{{if .Truth}}<h2 id="episodes">Labelled episodes</h2>
<table>
<tr><th>metric</th><th>value</th></tr>
{{range .Metrics}}<tr><td>{{.Key}}</td><td class="num">{{.Value}}</td></tr>
{{end}}</table>
<table>
<tr><th>episode</th><th>kind</th><th>start</th><th>end</th><th>channels</th><th>first alert inside</th><th>delay</th><th>channel in top 3</th></tr>
{{range .Episodes}}<tr{{if not .Detected}} class="missed"{{end}}><td>{{.ID}}</td><td>{{.Kind}}</td><td>{{.Start}}</td><td>{{.End}}</td><td>{{.Channels}}</td><td>{{if .Detected}}{{.Alert}}{{else}}missed{{end}}</td><td class="num">{{.Delay}}</td><td>{{if .Isolated}}yes{{else}}no{{end}}</td></tr>
{{end}}</table>{{end}}

<h2 id="alerts">Alerts</h2>
{{if .Alerts}}<table>
<tr><th>start</th><th>end</th><th>unit</th><th>severity</th><th>statistic</th><th>peak / limit</th><th>top sensors</th><th>reading and expected value (95 % band)</th>{{if .Truth}}<th>truth</th>{{end}}</tr>
{{range .Alerts}}<tr{{if .False}} class="false"{{end}}><td>{{.Start}}</td><td>{{.End}}</td><td>{{.Unit}}</td><td>{{.Severity}}</td><td>{{.Statistic}}</td><td class="num">{{.Ratio}}</td><td>{{.Top}}</td><td>{{.Expected}}</td>{{if $.Truth}}<td>{{.Match}}</td>{{end}}</tr>
{{end}}</table>
{{if .AlertsLeftOut}}<p class="note">{{.AlertsLeftOut}} later alert(s) are left out of this table; the --alerts file holds them all.</p>{{end}}
{{else}}<p>No alerts.</p>{{end}}

{{range .Units}}<h2 id="{{.Anchor}}">Unit {{.Name}}</h2>
<p class="note">{{.Channels}} channel(s), {{.Frames}} frame(s), model {{.State}}.{{if gt .PerBucket 1}} The charts are downsampled to bound memory and file size: each point covers up to {{.PerBucket}} consecutive frames and shows their minimum and maximum (the limit at the last of them); the heat map shows the largest contribution within each point.{{end}}</p>
{{if .Error}}<p>Not monitored: {{.Error}}</p>{{end}}
{{if .Stats}}<p class="key">Key:<span class="sw band"></span>minimum to maximum per point<span class="sw line"></span>maximum<span class="sw limit"></span>control limit<span class="sw alert"></span>alert<span class="sw episode"></span>labelled episode (named at the top)</p>{{end}}
<div class="charts">
{{range .Stats}}<img src="{{.Src}}" alt="{{.Alt}}"/>
{{end}}</div>
{{if .Heat}}<h3>Top contributing channels</h3>
<p class="note">Reconstruction-based contribution of each channel over its own control limit (Alcalá and Qin 2009); 1 or more means the channel alone explains a significant part of the deviation.</p>
<div class="charts"><img src="{{.Heat.Src}}" alt="{{.Heat.Alt}}"/></div>{{end}}
{{if .OpStates}}<h3>Operating states</h3>
<p class="note">One model per state; at the end of the replay the unit was in state {{.OpState}}. Loadings of each state's modes, by channel.</p>
{{range .OpStates}}<h4>State {{.Label}}{{if .Current}} (current){{end}}, {{.Frames}} frame(s)</h4>
<div class="modes">
{{range .Modes}}<img src="{{.Src}}" alt="{{.Alt}}"/>
{{end}}</div>
{{end}}{{else}}{{if .Modes}}<h3>Modes</h3>
<p class="note">Loadings of each mode at the end of the replay, by channel.</p>
<div class="modes">
{{range .Modes}}<img src="{{.Src}}" alt="{{.Alt}}"/>
{{end}}</div>{{end}}{{end}}
{{end}}
<p class="advisory">{{.Advisory}}</p>
</main>
</body>
</html>
`))
