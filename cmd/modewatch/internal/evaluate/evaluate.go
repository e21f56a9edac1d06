// Package evaluate scores a replay's alerts against labelled episodes (a
// truth file): detection, delay, false alerts, isolation and, per unit, the
// share of normal time with an alert open, as reported by "modewatch replay
// --truth FILE --json", tune, the demo, the report and the realism suite.
// The scoring is strict: an alert counts only for the unit that raised it.
package evaluate

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"sort"
	"strings"
	"time"

	"modewatch/alerts"
	"modewatch/sim"
)

// DefaultGrace is how far an episode is extended on both sides before an
// alert starting outside it counts as false.
const DefaultGrace = 15 * time.Minute

// Episode is one labelled incident of a truth file: the type sim writes
// truth files with ([sim.TruthEpisode]).
type Episode = sim.TruthEpisode

// Truth is the content of a truth file:
// {"episodes":[{"id","start","end","kind","channels":[...]}]} with RFC 3339
// times and channel names in the auto-discovery form ([sim.Truth]).
type Truth = sim.Truth

// ReadTruth reads and checks a truth file.
func ReadTruth(path string) (*Truth, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("evaluate: %w", err)
	}
	defer f.Close()
	t, err := DecodeTruth(f)
	if err != nil {
		return nil, fmt.Errorf("evaluate: %s: %w", path, err)
	}
	return t, nil
}

// DecodeTruth decodes a truth document; unknown fields, an episode
// without id or with end before start are errors.
func DecodeTruth(r io.Reader) (*Truth, error) {
	dec := json.NewDecoder(r)
	dec.DisallowUnknownFields()
	var t Truth
	if err := dec.Decode(&t); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			return nil, fmt.Errorf("byte %d: %w", se.Offset, err)
		}
		return nil, err
	}
	var errs []error
	for i, e := range t.Episodes {
		if e.ID == "" {
			errs = append(errs, fmt.Errorf("episodes[%d]: id is missing", i))
		}
		if e.Start.IsZero() || e.End.IsZero() {
			errs = append(errs, fmt.Errorf("episodes[%d] (%s): start and end are required", i, e.ID))
		} else if e.End.Before(e.Start) {
			errs = append(errs, fmt.Errorf("episodes[%d] (%s): end %s is before start %s", i, e.ID, e.End.Format(time.RFC3339), e.Start.Format(time.RFC3339)))
		}
	}
	if len(errs) > 0 {
		return nil, errors.Join(errs...)
	}
	return &t, nil
}

// Alert is what the metrics need of an alert record: its unit, when it
// started and ended, and its contributing channels, ranked.
type Alert struct {
	ID    string
	Unit  string
	Start time.Time
	End   time.Time // zero: still open when the replay ended
	Top   []string  // contributing channels, largest share first
	// Silent marks a unit's silent alert (every channel of the unit
	// without readings): it names the unit, not a channel, and isolates an
	// outage episode of its unit.
	Silent bool
}

// AlertsOf converts alert records to the alerts the metrics score: every
// incident (flood records are left out: their members are incidents
// themselves; notices are not alerts), with its contributors ranked; a
// data-quality alert without contributors names its one channel.
func AlertsOf(recs []*alerts.Record) []Alert {
	var out []Alert
	for _, r := range recs {
		if r.Kind != alerts.KindIncident {
			continue
		}
		a := Alert{ID: r.ID, Unit: r.Unit, Start: r.Start,
			Silent: r.Quality != nil && r.Quality.Kind == alerts.QualitySilent}
		if r.End != nil {
			a.End = *r.End
		}
		_, a.Top = r.Channels(0)
		out = append(out, a)
	}
	return out
}

// Run is what the scorer needs of the replay beyond the alerts.
type Run struct {
	// From and To bound the replay in event time (To excluded): the
	// per-day rate and the open share are taken over it.
	From, To time.Time
	// Grace extends each episode on both sides before an alert starting
	// outside it counts as false (DefaultGrace is the commands' default).
	Grace time.Duration
	// UnitOf maps a channel to the unit that holds it under the
	// configuration or auto-discovery. Nil, or "" for a channel it does not
	// know: the text before the channel's first dot (the measurement, the
	// unit under auto-discovery).
	UnitOf func(channel string) string
	// Units lists the units reported under Metrics.Units, in order; units
	// that only appear in alerts are added after them, sorted.
	Units []string
	// Hold returns a unit's bounded hold (alerts.accept_after): an alert
	// should not stay open past the end of the unit's episodes it overlaps
	// (± grace) plus the hold. Nil, or a hold ≤ 0 for a unit: not checked.
	Hold func(unit string) time.Duration
}

func (r Run) unitOf(ch string) string {
	if r.UnitOf != nil {
		if u := r.UnitOf(ch); u != "" {
			return u
		}
	}
	if i := strings.IndexByte(ch, '.'); i >= 0 {
		return ch[:i]
	}
	return ch
}

// Metrics is the "metrics" object of replay --json. Rates and delays that
// are undefined (no episodes, nothing detected) are null.
type Metrics struct {
	Episodes          int      `json:"episodes"`
	Detected          int      `json:"detected"`
	DetectionRate     *float64 `json:"detection_rate"`
	MedianDelayS      *float64 `json:"median_delay_s"`
	FalseAlerts       int      `json:"false_alerts"`
	FalseAlertsPerDay *float64 `json:"false_alerts_per_day"`
	IsolatedTop3      int      `json:"isolated_top3"`
	// OpenPastHold counts the alerts open longer than their episode plus
	// the unit's bounded hold (see UnitMetrics.OpenPastHold); null when
	// the run gave no hold.
	OpenPastHold *int `json:"open_past_hold"`
	// Per unit: alerts, false alerts, open share and longest alert.
	Units []UnitMetrics `json:"units"`
	// Per episode: the id of the first alert inside it ("" if missed),
	// for reports.
	Matches []Match `json:"matches,omitempty"`
}

// UnitMetrics scores one unit.
type UnitMetrics struct {
	Unit        string `json:"unit"`
	Alerts      int    `json:"alerts"`
	FalseAlerts int    `json:"false_alerts"`
	// AlertOpenShareNormal is the share of the unit's normal time (the run
	// outside the unit's own episodes ± grace) during which at least one of
	// its alerts was open; null when the unit has no normal time.
	AlertOpenShareNormal *float64 `json:"alert_open_share_normal"`
	// LongestOpenAlertS is the longest time one alert of the unit was open
	// (until the end of the run for an alert still open), in seconds.
	LongestOpenAlertS float64 `json:"longest_open_alert_s"`
	// OpenPastHold counts the unit's alerts still open after the end of
	// the latest of its episodes they started in (extended by grace; the
	// alert's start when none) plus the unit's bounded hold
	// (Run.Hold), until the end of the run for one still open;
	// LongestPastHoldS is the longest such overrun, in seconds. Both 0
	// when the run gives no hold.
	OpenPastHold     int     `json:"open_past_hold"`
	LongestPastHoldS float64 `json:"longest_past_hold_s"`
}

// Match says how one episode was seen.
type Match struct {
	Episode  string   `json:"episode"`
	Alert    string   `json:"alert,omitempty"`
	DelayS   *float64 `json:"delay_s"`
	Isolated bool     `json:"isolated_top3"`
}

// inside reports whether alert a starts inside an episode of its own unit
// (epUnits, per episode) extended by grace on both sides.
func inside(a Alert, episodes []Episode, epUnits []map[string]bool, grace time.Duration) bool {
	for i, e := range episodes {
		if epUnits[i][a.Unit] && !a.Start.Before(e.Start.Add(-grace)) && !a.Start.After(e.End.Add(grace)) {
			return true
		}
	}
	return false
}

// False reports whether Compute counts alert a as false against episodes:
// it starts outside every episode of its own unit extended by r.Grace.
func (r Run) False(a Alert, episodes []Episode) bool {
	return !inside(a, episodes, r.episodeUnits(episodes), r.Grace)
}

// episodeUnits returns the units of each episode: those holding its
// channels.
func (r Run) episodeUnits(episodes []Episode) []map[string]bool {
	epUnits := make([]map[string]bool, len(episodes))
	for i, e := range episodes {
		epUnits[i] = map[string]bool{}
		for _, ch := range e.Channels {
			epUnits[i][r.unitOf(ch)] = true
		}
	}
	return epUnits
}

// Compute scores alerts against episodes strictly, by unit: an alert
// speaks only for the unit that raised it.
//
//   - An episode belongs to the units holding its channels (run.UnitOf).
//     It is detected when an alert of one of those units starts inside
//     [start, end] (both ends included); its delay is from the episode
//     start to the first such alert. An alert of another unit is no
//     detection.
//   - A false alert starts outside every episode of its own unit extended
//     by grace on both sides, [start − grace, end + grace]; an alert of
//     another unit during an episode is false.
//   - isolated_top3 counts detected episodes whose first alert lists one of
//     the episode's channels among its top three contributors (a
//     data-quality alert lists its own channel).
//   - median_delay_s is the median of the delays of the detected episodes
//     (the mean of the middle two for an even count).
//   - Per unit, alert_open_share_normal is |open ∩ normal| / |normal|,
//     where normal is [from, to) minus the unit's episodes ± grace and open
//     is the union of its alerts' [start, end) (end = to while open);
//     longest_open_alert_s is the longest such interval of one alert.
//   - Per unit, with a bounded hold h (Run.Hold), an alert is open past
//     its hold when its end (to while open) is later than
//     max(start, end + grace of the unit's episodes it started in) + h: the
//     target "no incident open longer than its episode plus accept_after".
//
// An alert inside two overlapping episodes of its unit detects both.
func Compute(alerts []Alert, episodes []Episode, run Run) Metrics {
	sorted := make([]Alert, len(alerts))
	copy(sorted, alerts)
	sort.SliceStable(sorted, func(i, j int) bool { return sorted[i].Start.Before(sorted[j].Start) })

	epUnits := run.episodeUnits(episodes)

	m := Metrics{Episodes: len(episodes), Units: []UnitMetrics{}}
	delays := m.match(sorted, episodes, epUnits)
	byUnit, order := unitsOf(sorted, run)
	for _, a := range sorted {
		um := byUnit[a.Unit]
		um.Alerts++
		if !inside(a, episodes, epUnits, run.Grace) {
			m.FalseAlerts++
			um.FalseAlerts++
		}
	}
	for _, u := range order {
		um := byUnit[u]
		um.openTimes(u, sorted, episodes, epUnits, run)
		m.Units = append(m.Units, *um)
	}
	if run.Hold != nil {
		n := 0
		for _, um := range m.Units {
			n += um.OpenPastHold
		}
		m.OpenPastHold = &n
	}

	if m.Episodes > 0 {
		r := float64(m.Detected) / float64(m.Episodes)
		m.DetectionRate = &r
	}
	if len(delays) > 0 {
		sort.Float64s(delays)
		n := len(delays)
		med := delays[n/2]
		if n%2 == 0 {
			med = (delays[n/2-1] + delays[n/2]) / 2
		}
		m.MedianDelayS = &med
	}
	if span := run.To.Sub(run.From); span > 0 {
		r := float64(m.FalseAlerts) / (span.Hours() / 24)
		m.FalseAlertsPerDay = &r
	}
	return m
}

// match finds, for each episode, the first alert of one of its units
// (epUnits) starting inside it (sorted by start), counting detections and
// isolations into m, and returns the detection delays in seconds.
func (m *Metrics) match(sorted []Alert, episodes []Episode, epUnits []map[string]bool) []float64 {
	var delays []float64
	for i, e := range episodes {
		match := Match{Episode: e.ID}
		for _, a := range sorted {
			if !epUnits[i][a.Unit] || a.Start.Before(e.Start) || a.Start.After(e.End) {
				continue
			}
			d := a.Start.Sub(e.Start).Seconds()
			match.Alert, match.DelayS = a.ID, &d
			delays = append(delays, d)
			m.Detected++
			top := a.Top
			if len(top) > 3 {
				top = top[:3]
			}
			for _, ch := range top {
				if slices.Contains(e.Channels, ch) {
					match.Isolated = true
				}
			}
			if a.Silent && e.Kind == string(sim.Outage) {
				match.Isolated = true // the silent unit is the outage's unit
			}
			if match.Isolated {
				m.IsolatedTop3++
			}
			break
		}
		m.Matches = append(m.Matches, match)
	}
	return delays
}

// unitsOf returns the per-unit metrics to fill, by unit, and the units in
// report order: those of the run, then any other unit with alerts, sorted.
func unitsOf(sorted []Alert, run Run) (map[string]*UnitMetrics, []string) {
	byUnit := map[string]*UnitMetrics{}
	var order []string
	for _, u := range run.Units {
		if byUnit[u] == nil {
			byUnit[u] = &UnitMetrics{Unit: u}
			order = append(order, u)
		}
	}
	var extra []string
	for _, a := range sorted {
		if byUnit[a.Unit] == nil {
			extra = append(extra, a.Unit)
			byUnit[a.Unit] = &UnitMetrics{Unit: a.Unit}
		}
	}
	sort.Strings(extra)
	return byUnit, append(order, extra...)
}

// openTimes sets unit u's longest open alert, its alerts open past the
// hold, and the share of its normal time (the run minus its episodes ±
// grace) with an alert open.
func (um *UnitMetrics) openTimes(u string, sorted []Alert, episodes []Episode, epUnits []map[string]bool, run Run) {
	grace := run.Grace
	var excluded, open []interval
	for i, e := range episodes {
		if epUnits[i][u] {
			excluded = append(excluded, interval{e.Start.Add(-grace), e.End.Add(grace)})
		}
	}
	for _, a := range sorted {
		if a.Unit != u {
			continue
		}
		end := a.End
		if end.IsZero() || (!run.To.IsZero() && end.After(run.To)) {
			end = run.To
		}
		if d := end.Sub(a.Start).Seconds(); d > um.LongestOpenAlertS {
			um.LongestOpenAlertS = d
		}
		open = append(open, interval{a.Start, end})
		if over := pastHold(a, end, u, episodes, epUnits, grace, run.Hold); over > 0 {
			um.OpenPastHold++
			um.LongestPastHoldS = max(um.LongestPastHoldS, over.Seconds())
		}
	}
	normal := subtract([]interval{{run.From, run.To}}, excluded)
	if total := length(normal); total > 0 {
		share := length(intersect(normal, union(open))) / total
		um.AlertOpenShareNormal = &share
	}
}

// pastHold returns how long alert a of unit u, open until end, stayed
// open past the end of the latest of u's episodes it started in (extended
// by grace; its start when none) plus u's hold; 0 when not past it or when
// there is no hold. An alert that stays open into later episodes is
// measured from its own: it swallowed them.
func pastHold(a Alert, end time.Time, u string, episodes []Episode, epUnits []map[string]bool, grace time.Duration,
	hold func(string) time.Duration) time.Duration {
	if hold == nil {
		return 0
	}
	h := hold(u)
	if h <= 0 {
		return 0
	}
	due := a.Start
	for i, e := range episodes {
		from, to := e.Start.Add(-grace), e.End.Add(grace)
		if epUnits[i][u] && !a.Start.Before(from) && !a.Start.After(to) && to.After(due) {
			due = to
		}
	}
	return max(0, end.Sub(due.Add(h)))
}

// interval is [from, to) in event time.
type interval struct{ from, to time.Time }

// union merges intervals into sorted disjoint ones (empty ones dropped).
func union(in []interval) []interval {
	var s []interval
	for _, iv := range in {
		if iv.to.After(iv.from) {
			s = append(s, iv)
		}
	}
	sort.Slice(s, func(i, j int) bool { return s[i].from.Before(s[j].from) })
	var out []interval
	for _, iv := range s {
		if n := len(out); n > 0 && !iv.from.After(out[n-1].to) {
			if iv.to.After(out[n-1].to) {
				out[n-1].to = iv.to
			}
			continue
		}
		out = append(out, iv)
	}
	return out
}

// subtract removes the cut intervals from the sorted disjoint set in.
func subtract(in, cut []interval) []interval {
	out := union(in)
	for _, c := range union(cut) {
		var next []interval
		for _, iv := range out {
			if !c.from.After(iv.from) && !c.to.Before(iv.to) {
				continue // fully cut
			}
			if !c.to.After(iv.from) || !c.from.Before(iv.to) {
				next = append(next, iv) // no overlap
				continue
			}
			if c.from.After(iv.from) {
				next = append(next, interval{iv.from, c.from})
			}
			if c.to.Before(iv.to) {
				next = append(next, interval{c.to, iv.to})
			}
		}
		out = next
	}
	return out
}

// intersect returns the overlap of two sorted disjoint sets.
func intersect(a, b []interval) []interval {
	var out []interval
	for i, j := 0, 0; i < len(a) && j < len(b); {
		from, to := a[i].from, a[i].to
		if b[j].from.After(from) {
			from = b[j].from
		}
		if b[j].to.Before(to) {
			to = b[j].to
		}
		if to.After(from) {
			out = append(out, interval{from, to})
		}
		if a[i].to.Before(b[j].to) {
			i++
		} else {
			j++
		}
	}
	return out
}

func length(s []interval) float64 {
	var d time.Duration
	for _, iv := range s {
		d += iv.to.Sub(iv.from)
	}
	return d.Seconds()
}
