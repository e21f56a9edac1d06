package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"path/filepath"
	"slices"
	"strings"
	"text/tabwriter"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/configs/realism"
	"modewatch/sim"
)

// suiteOptions are the flags of "sim --suite".
type suiteOptions struct {
	config string   // --config FILE applied to fit and replay ("" : defaults)
	plants []string // plant names to run (nil: all, the demo included)
	days   float64  // > 0: keep only this many days on each side of the split
	out    string   // "" : a temporary directory, removed afterwards
	json   bool
	jobs   int // with --seeds: runs at once (≤ 0: GOMAXPROCS)
}

// suiteRow is one plant's line of the suite table (and of --json).
type suiteRow struct {
	Plant string `json:"plant"`
	// Seed is the seed the plant's readings were drawn from (the plant
	// file's, or one of the sequence of "--seeds").
	Seed         uint64           `json:"seed"`
	Period       string           `json:"period"`
	Channels     int              `json:"channels"`
	Units        int              `json:"units"`
	NormalDays   float64          `json:"normal_days"`
	TestDays     float64          `json:"test_days"`
	Metrics      evaluate.Metrics `json:"metrics"`
	WorstUnit    string           `json:"worst_unit"`     // the unit with the largest open share
	OpenShare    *float64         `json:"open_share"`     // that unit's alert_open_share_normal
	LongestOpenS float64          `json:"longest_open_s"` // the longest open alert of any unit
	// PastHold counts the alerts open longer than their episode plus the
	// unit's accept_after (evaluate.UnitMetrics.OpenPastHold), over the
	// plant; LongestPastHoldS is the longest overrun.
	PastHold         int                    `json:"open_past_hold"`
	LongestPastHoldS float64                `json:"longest_past_hold_s"`
	Kinds            map[string]suiteDetect `json:"by_kind"`
	// AtSwitch lists the false alerts (the strict scorer's: outside every
	// episode of their unit ± grace) that start within suiteSwitchWindow
	// after a machine start or stop, a status change or the ramp of a
	// driver move, or name a status channel (switchAlerts): the issue's
	// target is none.
	AtSwitch []string `json:"at_switch"`
	// Notices are the informational records of the test days (a new
	// operating point or state), which the scorer does not count.
	Notices []suiteNotice `json:"notices"`
	// Budgets sets each calibrated unit's measured false alerts beside
	// fit's expected rate and interval (suiteBudgets).
	Budgets []suiteBudget `json:"budget,omitempty"`
	Error   string        `json:"error,omitempty"`
}

// suiteDetect counts the episodes of one fault kind and how many were
// detected.
type suiteDetect struct {
	Episodes int `json:"episodes"`
	Detected int `json:"detected"`
}

// suitePlant is a plant of the suite, loaded.
type suitePlant struct {
	name string
	s    *sim.Scenario
}

// suitePlants returns the realism plants and the demo plant (split, as
// the demo fits, after its fault-free normal days), keeping only the named
// ones when names is not empty.
func suitePlants(names []string) ([]suitePlant, error) {
	var out []suitePlant
	for _, p := range realism.Plants() {
		s, err := sim.LoadBytes("configs/realism/"+p.File, p.YAML)
		if err != nil {
			return nil, err
		}
		out = append(out, suitePlant{p.Name, s})
	}
	demo, err := sim.Demo()
	if err != nil {
		return nil, err
	}
	out = append(out, suitePlant{"demo", demo})
	if len(names) == 0 {
		return out, nil
	}
	var kept []suitePlant
	for _, n := range names {
		i := slices.IndexFunc(out, func(p suitePlant) bool { return p.name == n })
		if i < 0 {
			all := make([]string, len(out))
			for j, p := range out {
				all[j] = p.name
			}
			return nil, usagef("--plants: unknown plant %q (one of %s)", n, strings.Join(all, ", "))
		}
		kept = append(kept, out[i])
	}
	return kept, nil
}

// runSuite runs every plant of the suite as a new user would: sim writes
// its normal and test days, fit learns on the normal days, replay scores
// the test days from that model against the labelled faults, with the
// default settings (or --config), and one table sums it up.
func runSuite(ctx context.Context, env IO, opt suiteOptions) error {
	plants, dir, cleanup, err := suiteSetup(opt)
	if err != nil {
		return err
	}
	defer cleanup()
	if !opt.json {
		fmt.Fprintf(env.Out, "realism suite: per plant, fit on the normal days, replay the test days from that model, %s;\n", suiteSettings(opt))
		fmt.Fprintln(env.Out, "alerts scored strictly (an alert counts only in the unit that holds the faulty channel). Invented plants.")
	}
	var rows []suiteRow
	for _, p := range plants {
		if err := ctx.Err(); err != nil {
			return err
		}
		row := runSuitePlant(ctx, filepath.Join(dir, p.name), p, opt)
		rows = append(rows, row)
	}
	if opt.json {
		enc := json.NewEncoder(env.Out)
		enc.SetIndent("", "  ")
		return enc.Encode(rows)
	}
	printSuite(env.Out, rows)
	fmt.Fprintln(env.Out, "Advisory only: modewatch never acts on the plant; verify in the field and follow site procedures.")
	for _, r := range rows {
		if r.Error != "" {
			return fmt.Errorf("plant %s: %s", r.Plant, r.Error)
		}
	}
	return nil
}

// runSuitePlant writes, fits and replays one plant in dir.
func runSuitePlant(ctx context.Context, dir string, p suitePlant, opt suiteOptions) suiteRow {
	s := p.s
	from, to := s.Start, s.End()
	if opt.days > 0 {
		keep := time.Duration(opt.days * float64(24*time.Hour))
		from, to = maxTime(from, s.Split.Add(-keep)), minTime(to, s.Split.Add(keep))
	}
	row := suiteRow{Plant: p.name, Seed: s.Seed, Period: s.Period.String(), Channels: len(s.Channels()), Units: len(s.Units),
		NormalDays: s.Split.Sub(from).Hours() / 24, TestDays: to.Sub(s.Split).Hours() / 24, Kinds: map[string]suiteDetect{}}
	fail := func(err error) suiteRow {
		row.Error = err.Error()
		return row
	}
	files, err := s.WriteSplit(dir, false, from, to)
	if err != nil {
		return fail(err)
	}
	model := filepath.Join(dir, "model.json")
	var cfgArgs []string
	if opt.config != "" {
		cfgArgs = []string{"--config", opt.config}
	}
	var errb bytes.Buffer
	quiet := IO{In: strings.NewReader(""), Out: io.Discard, Err: &errb}
	if err := runFit(ctx, quiet, append(slices.Clone(cfgArgs), "--quiet", "--out", model, files.Normal)); err != nil {
		return fail(fmt.Errorf("fit: %w %s", err, strings.TrimSpace(errb.String())))
	}
	var out bytes.Buffer
	quiet.Out = &out
	alertsFile := filepath.Join(dir, "alerts.jsonl")
	if err := runReplay(ctx, quiet, append(slices.Clone(cfgArgs), "--quiet", "--json", "--model", model, "--truth", files.Truth, "--alerts", alertsFile, files.Test)); err != nil {
		return fail(fmt.Errorf("replay: %w %s", err, strings.TrimSpace(errb.String())))
	}
	var sum summary
	if err := json.Unmarshal(out.Bytes(), &sum); err != nil || sum.Metrics == nil {
		return fail(fmt.Errorf("replay output: %v", err))
	}
	row.Metrics = *sum.Metrics
	if row.Budgets, err = suiteBudgets(model, row.Metrics.Units, row.TestDays); err != nil {
		return fail(err)
	}
	for _, u := range row.Metrics.Units {
		if u.AlertOpenShareNormal != nil && (row.OpenShare == nil || *u.AlertOpenShareNormal > *row.OpenShare) {
			row.OpenShare, row.WorstUnit = u.AlertOpenShareNormal, u.Unit
		}
		row.LongestOpenS = max(row.LongestOpenS, u.LongestOpenAlertS)
		row.PastHold += u.OpenPastHold
		row.LongestPastHoldS = max(row.LongestPastHoldS, u.LongestPastHoldS)
	}
	tr, err := evaluate.ReadTruth(files.Truth)
	if err != nil {
		return fail(err)
	}
	sw, status, err := plantSwitches(s, s.Split, to)
	if err != nil {
		return fail(err)
	}
	// The replay's scorer: auto-discovered units, the default grace.
	run := evaluate.Run{Grace: evaluate.DefaultGrace}
	isFalse := func(unit string, start time.Time) bool {
		return run.False(evaluate.Alert{Unit: unit, Start: start}, tr.Episodes)
	}
	if row.AtSwitch, err = switchAlerts(alertsFile, isFalse, sw, status); err != nil {
		return fail(err)
	}
	if row.Notices, err = readNotices(alertsFile); err != nil {
		return fail(err)
	}
	for i, e := range tr.Episodes {
		k := row.Kinds[e.Kind]
		k.Episodes++
		if i < len(row.Metrics.Matches) && row.Metrics.Matches[i].Alert != "" {
			k.Detected++
		}
		row.Kinds[e.Kind] = k
	}
	return row
}

// printSuite prints the suite table.
func printSuite(w io.Writer, rows []suiteRow) {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "plant\tperiod\tchannels\tunits\tdays\tdetected\tisolated\tfalse/day\tmedian delay\topen share (unit)\tlongest alert\tpast hold")
	for _, r := range rows {
		if r.Error != "" {
			fmt.Fprintf(tw, "%s\t%s\t%d\t%d\t%s\terror: %s\n", r.Plant, r.Period, r.Channels, r.Units, suiteDays(r), r.Error)
			continue
		}
		m := r.Metrics
		perDay, delay, share := "–", "–", "–"
		if m.FalseAlertsPerDay != nil {
			perDay = fmt.Sprintf("%.2f", *m.FalseAlertsPerDay)
		}
		if m.MedianDelayS != nil {
			delay = (time.Duration(*m.MedianDelayS) * time.Second).String()
		}
		if r.OpenShare != nil {
			share = fmt.Sprintf("%.1f%% (%s)", 100**r.OpenShare, r.WorstUnit)
		}
		past := "0"
		if r.PastHold > 0 {
			past = fmt.Sprintf("%d (up to %s)", r.PastHold, time.Duration(r.LongestPastHoldS)*time.Second)
		}
		fmt.Fprintf(tw, "%s\t%s\t%d\t%d\t%s\t%d/%d\t%d/%d\t%s\t%s\t%s\t%s\t%s\n", r.Plant, r.Period, r.Channels, r.Units, suiteDays(r),
			m.Detected, m.Episodes, m.IsolatedTop3, m.Episodes, perDay, delay, share, (time.Duration(r.LongestOpenS) * time.Second).String(), past)
	}
	tw.Flush()
	fmt.Fprintln(w, "days: normal + test. open share: the largest share of a unit's normal time (outside its own faults ± 15 min) with an alert open.")
	fmt.Fprintln(w, "past hold: alerts open longer than their fault (± 15 min; none: their start) plus accept_after, and the longest overrun (target 0).")
	parts := make([]string, 0, len(rows))
	for _, r := range rows {
		if r.Error == "" {
			parts = append(parts, fmt.Sprintf("%s %d", r.Plant, len(r.AtSwitch)))
		}
	}
	fmt.Fprintf(w, "at a switch: false alerts starting within %v after a machine start or stop, a status change or a planned move (and its ramp), or naming a status channel (target 0; listed in --json): %s\n",
		suiteSwitchWindow, strings.Join(parts, ", "))
	printSuiteNotices(w, rows)
	printSuiteBudgets(w, rows)
	// Detection by fault kind, over all plants.
	kinds := map[string]suiteDetect{}
	var names []string
	for _, r := range rows {
		for k, d := range r.Kinds {
			if _, seen := kinds[k]; !seen {
				names = append(names, k)
			}
			t := kinds[k]
			t.Episodes += d.Episodes
			t.Detected += d.Detected
			kinds[k] = t
		}
	}
	slices.Sort(names)
	parts = make([]string, len(names))
	for i, k := range names {
		parts[i] = fmt.Sprintf("%s %d/%d", k, kinds[k].Detected, kinds[k].Episodes)
	}
	if len(parts) > 0 {
		fmt.Fprintf(w, "detected by kind, all plants: %s\n", strings.Join(parts, ", "))
	}
}

func suiteDays(r suiteRow) string {
	return fmt.Sprintf("%g+%g", round2(r.NormalDays), round2(r.TestDays))
}

func round2(x float64) float64 { return float64(int64(x*100+0.5)) / 100 }

func minTime(a, b time.Time) time.Time {
	if a.Before(b) {
		return a
	}
	return b
}

func maxTime(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}
