// Package evaluate scores a replay's alerts against labelled episodes (a
// truth file): detection, delay, false alerts and isolation, as reported by
// "modewatch replay --truth FILE --json".
package evaluate

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"sort"
	"time"
)

// DefaultGrace is how far an episode is extended on both sides before an
// alert starting outside it counts as false.
const DefaultGrace = 15 * time.Minute

// Episode is one labelled incident of a truth file.
type Episode struct {
	ID       string    `json:"id"`
	Start    time.Time `json:"start"`
	End      time.Time `json:"end"`
	Kind     string    `json:"kind"`
	Channels []string  `json:"channels"`
}

// Truth is the content of a truth file:
// {"episodes":[{"id","start","end","kind","channels":[...]}]} with RFC 3339
// times and channel names in the auto-discovery form.
type Truth struct {
	Episodes []Episode `json:"episodes"`
}

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

// Alert is what the metrics need of an alert record: when it started and
// its contributing channels, ranked.
type Alert struct {
	ID    string
	Start time.Time
	Top   []string // contributing channels, largest share first
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
	// Per episode: the id of the first alert inside it ("" if missed),
	// for reports.
	Matches []Match `json:"matches,omitempty"`
}

// Match says how one episode was seen.
type Match struct {
	Episode  string   `json:"episode"`
	Alert    string   `json:"alert,omitempty"`
	DelayS   *float64 `json:"delay_s"`
	Isolated bool     `json:"isolated_top3"`
}

// Compute scores alerts against episodes over a replay that covered span
// of event time (for the per-day rate).
//
//   - An episode is detected when an alert starts inside [start, end]
//     (both ends included); its delay is from the episode start to the
//     first such alert.
//   - A false alert starts outside every episode extended by grace on both
//     sides, [start − grace, end + grace].
//   - isolated_top3 counts detected episodes whose first alert lists one of
//     the episode's channels among its top three contributors.
//   - median_delay_s is the median of the delays of the detected episodes
//     (the mean of the middle two for an even count).
//
// An alert inside two overlapping episodes detects both.
func Compute(alerts []Alert, episodes []Episode, span, grace time.Duration) Metrics {
	sorted := make([]Alert, len(alerts))
	copy(sorted, alerts)
	sort.SliceStable(sorted, func(i, j int) bool { return sorted[i].Start.Before(sorted[j].Start) })

	m := Metrics{Episodes: len(episodes)}
	var delays []float64
	for _, e := range episodes {
		match := Match{Episode: e.ID}
		for _, a := range sorted {
			if a.Start.Before(e.Start) || a.Start.After(e.End) {
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
				for _, ech := range e.Channels {
					if ch == ech {
						match.Isolated = true
					}
				}
			}
			if match.Isolated {
				m.IsolatedTop3++
			}
			break
		}
		m.Matches = append(m.Matches, match)
	}
	for _, a := range sorted {
		inside := false
		for _, e := range episodes {
			if !a.Start.Before(e.Start.Add(-grace)) && !a.Start.After(e.End.Add(grace)) {
				inside = true
				break
			}
		}
		if !inside {
			m.FalseAlerts++
		}
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
	if span > 0 {
		r := float64(m.FalseAlerts) / (span.Hours() / 24)
		m.FalseAlertsPerDay = &r
	}
	return m
}
