package cli

import (
	"fmt"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/report"
)

// writeReport writes the replay --report directory: the summary (the
// --json object), the units with their modes, the collected score series,
// the alerts and, with a truth file, the episodes and metrics.
func writeReport(env IO, dir string, inputs []string, sum *summary, res *pipeline.ReplayResult, rec *recorder,
	tr *evaluate.Truth, grace time.Duration, col *report.Collector, quiet bool) error {
	in := &report.Input{
		Title:     "modewatch replay report",
		Inputs:    inputs,
		Summary:   sum,
		Units:     res.Pipeline.Views(),
		Metrics:   sum.Metrics,
		Grace:     grace,
		Collector: col,
		Generated: time.Now(),
	}
	if tr != nil {
		in.Episodes = tr.Episodes
	}
	for _, r := range rec.incidents() {
		a := report.Alert{ID: r.ID, Unit: r.Unit, Start: r.Start, End: r.End, Severity: r.Severity, Ratio: r.Peak.Ratio}
		a.Statistic, a.Top = r.Channels(3)
		if len(r.Contributors) > 0 && r.Contributors[0].Reading.Known() {
			a.Expected = r.Contributors[0].Expectation()
		}
		if r.Quality != nil && r.Quality.Level != nil {
			a.Expected = r.Quality.Describe()
		}
		in.Alerts = append(in.Alerts, a)
	}
	index, err := report.Write(dir, in)
	if err != nil {
		return err
	}
	if !quiet {
		fmt.Fprintf(env.Err, "report written to %s\n", index)
	}
	return nil
}
