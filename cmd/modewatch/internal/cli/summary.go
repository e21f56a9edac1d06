package cli

import (
	"fmt"
	"io"
	"strings"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
)

// summary is the JSON object of replay --json (and the text summary).
type summary struct {
	Period          string            `json:"period"`
	PeriodInferred  bool              `json:"period_inferred"`
	Frames          uint64            `json:"frames"`
	Channels        int               `json:"channels"`
	Segments        uint64            `json:"segments"`
	From            *time.Time        `json:"from"`
	To              *time.Time        `json:"to"`
	Lines           lineCounts        `json:"lines"`
	Units           []unitSummary     `json:"units"`
	Modes           []modeSummary     `json:"modes"`
	Alerts          int               `json:"alerts"`
	Floods          int               `json:"floods"`
	FramesPerSecond float64           `json:"frames_per_second"`
	ElapsedS        float64           `json:"elapsed_s"`
	Metrics         *evaluate.Metrics `json:"metrics,omitempty"`

	span time.Duration
	top  []alertLine
}

// lineCounts: lines of input by outcome; late and duplicate count readings
// (field values), as the aligner sees them.
type lineCounts struct {
	Total            uint64            `json:"total"`
	Accepted         uint64            `json:"accepted"`
	Rejected         uint64            `json:"rejected"`
	Late             uint64            `json:"late"`
	Duplicate        uint64            `json:"duplicate"`
	RejectedByReason map[string]uint64 `json:"rejected_by_reason"`
	OutOfRange       uint64            `json:"out_of_range"`
	NonFinite        uint64            `json:"nonfinite"`
	Strings          uint64            `json:"strings_ignored"`
	RefusedChannels  uint64            `json:"refused_channels"`
}

type unitSummary struct {
	Name        string               `json:"name"`
	Channels    int                  `json:"channels"`
	NotModelled []string             `json:"not_modelled,omitempty"`
	Frames      uint64               `json:"frames"`
	EmptyFrames uint64               `json:"empty_frames"`
	ModelState  string               `json:"model_state"`
	EffectiveN  float64              `json:"effective_samples"`
	Limits      *pipeline.LimitsView `json:"limits"`
	Alerts      int                  `json:"alerts"`
	Error       string               `json:"error,omitempty"`
}

type modeSummary struct {
	Unit string `json:"unit"`
	pipeline.ModeView
}

type alertLine struct {
	start    time.Time
	unit     string
	severity string
	stat     string
	ratio    float64
	top      []string
	expected string // the leading channel's reading and expected value
}

func summarize(res *pipeline.ReplayResult, rec *recorder) *summary {
	st := res.Intake.Stats()
	s := &summary{
		Period: res.Period.String(), PeriodInferred: res.Inferred,
		Channels: res.Intake.Channels().Len(), Segments: st.Segments(),
		Lines: lineCounts{
			Total: st.Lines, Accepted: st.Accepted, Rejected: st.Rejected(), Late: st.Late, Duplicate: st.Duplicate,
			RejectedByReason: map[string]uint64{
				"syntax": st.RejectedSyntax, "value": st.RejectedValue, "too_long": st.RejectedTooLong,
				"no_time": st.RejectedNoTime, "time_range": st.RejectedTimeRange,
			},
			OutOfRange: st.OutOfRange, NonFinite: st.NonFinite, Strings: st.Strings, RefusedChannels: st.RefusedChannels,
		},
		Units: []unitSummary{}, Modes: []modeSummary{},
		ElapsedS: res.Elapsed.Seconds(),
	}
	n, first, last := res.Pipeline.Frames()
	s.Frames = n
	if n > 0 {
		s.From, s.To = &first, &last
		s.span = last.Sub(first) + res.Period
	}
	if res.Elapsed > 0 {
		s.FramesPerSecond = float64(n) / res.Elapsed.Seconds()
	}
	perUnit := map[string]int{}
	for _, r := range rec.incidents() {
		perUnit[r.Unit]++
		s.Alerts++
		al := alertLine{start: r.Start, unit: r.Unit, severity: r.Severity, ratio: r.Peak.Ratio}
		al.stat, al.top = r.Channels(3)
		if len(r.Contributors) > 0 && r.Contributors[0].Expected.Known() {
			al.expected = r.Contributors[0].Expectation()
		}
		if r.Quality != nil && r.Quality.Level != nil {
			al.expected = r.Quality.Describe()
		}
		s.top = append(s.top, al)
	}
	s.Floods = rec.floods()
	for _, v := range res.Pipeline.Views() {
		s.Units = append(s.Units, unitSummary{
			Name: v.Name, Channels: len(v.Channels), NotModelled: v.NotModelled, Frames: v.Frames, EmptyFrames: v.EmptyFrames,
			ModelState: v.ModelState, EffectiveN: v.EffectiveN, Limits: v.Limits, Alerts: perUnit[v.Name], Error: v.Error,
		})
		for _, m := range v.Modes {
			s.Modes = append(s.Modes, modeSummary{Unit: v.Name, ModeView: m})
		}
	}
	return s
}

func printSummary(w io.Writer, s *summary) {
	span := ""
	if s.From != nil {
		span = fmt.Sprintf(" from %s to %s", s.From.Format(time.RFC3339), s.To.Format(time.RFC3339))
	}
	inferred := ""
	if s.PeriodInferred {
		inferred = " (inferred)"
	}
	fmt.Fprintf(w, "%d frames of %s%s%s, %d channels, %d segment(s)\n", s.Frames, s.Period, inferred, span, s.Channels, s.Segments)
	fmt.Fprintf(w, "lines: %d read, %d accepted, %d rejected; readings: %d late, %d duplicate, %d out of range, %d not finite\n",
		s.Lines.Total, s.Lines.Accepted, s.Lines.Rejected, s.Lines.Late, s.Lines.Duplicate, s.Lines.OutOfRange, s.Lines.NonFinite)
	for _, u := range s.Units {
		lim := "no limits yet"
		if u.Limits != nil && u.Limits.T2 != nil && u.Limits.SPE != nil {
			lim = fmt.Sprintf("T² limit %.2f, SPE limit %.2f", *u.Limits.T2, *u.Limits.SPE)
		}
		fmt.Fprintf(w, "unit %-12s %3d channels, %d frames, %s, %s, %d alert(s)\n", u.Name, u.Channels, u.Frames, u.ModelState, lim, u.Alerts)
		if u.Error != "" {
			fmt.Fprintf(w, "  not monitored: %s\n", u.Error)
		}
		for _, m := range s.Modes {
			if m.Unit != u.Name {
				continue
			}
			parts := make([]string, len(m.Channels))
			for i, c := range m.Channels {
				parts[i] = fmt.Sprintf("%s %+.2f", strings.TrimPrefix(c, u.Name+"."), m.Loadings[i])
			}
			fmt.Fprintf(w, "  mode %d (%4.1f%%): %s\n", m.ID, 100*m.VarianceShare, strings.Join(parts, ", "))
		}
	}
	fmt.Fprintf(w, "%d alert(s)", s.Alerts)
	if s.Floods > 0 {
		fmt.Fprintf(w, ", %d flood(s)", s.Floods)
	}
	fmt.Fprintf(w, "; %.0f frames/s\n", s.FramesPerSecond)
	for _, a := range s.top {
		fmt.Fprintf(w, "  %s %-10s %-6s %-4s ×%.1f  %s\n", a.start.Format(time.RFC3339), a.unit, a.severity, a.stat, a.ratio, strings.Join(a.top, ", "))
		if a.expected != "" {
			fmt.Fprintf(w, "      %s\n", a.expected)
		}
	}
	if m := s.Metrics; m != nil {
		fmt.Fprintf(w, "truth: %d of %d episodes detected", m.Detected, m.Episodes)
		if m.MedianDelayS != nil {
			fmt.Fprintf(w, ", median delay %s", time.Duration(*m.MedianDelayS*float64(time.Second)).Round(time.Second))
		}
		fmt.Fprintf(w, ", %d false alert(s)", m.FalseAlerts)
		if m.FalseAlertsPerDay != nil {
			fmt.Fprintf(w, " (%.2f per day)", *m.FalseAlertsPerDay)
		}
		fmt.Fprintf(w, ", %d isolated in the top 3\n", m.IsolatedTop3)
		for _, u := range m.Units {
			share := "no normal time"
			if u.AlertOpenShareNormal != nil {
				share = fmt.Sprintf("alert open %.1f%% of normal time", 100**u.AlertOpenShareNormal)
			}
			fmt.Fprintf(w, "  unit %-12s %d alert(s), %d false, %s, longest alert %s\n", u.Unit, u.Alerts, u.FalseAlerts, share,
				(time.Duration(u.LongestOpenAlertS) * time.Second).String())
		}
	}
	fmt.Fprintln(w, "Advisory only: verify in the field and follow site procedures.")
}
