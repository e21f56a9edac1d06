package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"runtime"
	"strings"
	"time"

	"modewatch/sim"
)

func init() {
	register(command{name: "sim", args: "[--scenario FILE] --out DIR | --suite", summary: "write an invented plant's readings (line protocol) and truth file; --suite runs the realism suite", run: runSim})
}

func runSim(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "sim", "[--scenario FILE] --out DIR [--gz] | --suite [--seeds N [--jobs J]] [--config FILE] [--plants A,B] [--days D] [--out DIR] [--json]", `
Generate the readings of an invented plant from a scenario file (YAML) as
line protocol, together with the truth file of its labelled fault
episodes. Output is deterministic for a given scenario seed. Without
--scenario the shipped demo scenario is used (configs/scenario-demo.yaml).

Writes DIR/readings.lp (or readings.lp.gz with --gz) and DIR/truth.json; a
scenario with a split (the realism plants) writes DIR/normal.lp, the normal
days to fit on, and DIR/test.lp, the days after the split, instead of
readings.lp.

--suite runs the realism suite (the plants of configs/realism and the
demo) on each plant's own seed and prints one table. --suite --seeds N runs
each plant on its shipped seed s and the next N-1, s+k for k = 0..N-1 (the
compressor station 11001.., the district heating 11003.., the water works
11002.., the demo 20260311..), and prints per plant the mean detected,
isolated and false alerts a day, the share of runs meeting each target,
the largest open share's mean and worst, and the per-unit budget summed
over the runs (--json: every run's row and the summary). Runs are
independent and go --jobs at a time; one seed of all four plants takes
about 9 s of CPU, so --seeds 10 takes 1 to 2 minutes on 2 cores (more on
a busy machine). With --out each run is kept in DIR/<plant>/<seed>
(about 250 MB a seed); without it each run's files are removed as it ends.
The data is invented, for demonstrations and tests only.`)
	var scenario, out string
	var gz bool
	var duration time.Duration
	fs.StringVar(&scenario, "scenario", "", "scenario `FILE` (YAML); default: the built-in demo scenario")
	fs.StringVar(&out, "out", "", "output `DIR` (created if needed; required)")
	fs.BoolVar(&gz, "gz", false, "gzip the readings")
	fs.DurationVar(&duration, "duration", 0, "write only this much from the scenario's start (e.g. 24h: the demo's first fault-free normal day)")
	var suite, asJSON bool
	var config, plants string
	var days float64
	fs.BoolVar(&suite, "suite", false, "run the realism suite: fit on each plant's normal days, replay its test days, print one table")
	fs.StringVar(&config, "config", "", "with --suite: apply the settings of configuration `FILE` (default: the defaults)")
	fs.StringVar(&plants, "plants", "", "with --suite: run only these plants (comma-separated names)")
	fs.Float64Var(&days, "days", 0, "with --suite: keep only `D` days on each side of the split (a quick check)")
	fs.BoolVar(&asJSON, "json", false, "with --suite: print the rows as JSON")
	var seeds, jobs int
	fs.IntVar(&seeds, "seeds", 0, "with --suite: run each plant on `N` seeds, its own and the next N-1, and sum the runs up (N = 10: 1–2 min on 2 cores)")
	fs.IntVar(&jobs, "jobs", runtime.GOMAXPROCS(0), "with --suite --seeds: runs at once")
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	if len(pos) > 0 {
		return usagef("unexpected arguments %q", pos)
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if suite {
		if scenario != "" || gz || duration != 0 {
			return usagef("--suite runs the built-in plants: --scenario, --gz and --duration do not apply")
		}
		if days < 0 {
			return usagef("--days %g: want D > 0", days)
		}
		opt := suiteOptions{config: config, days: days, out: out, json: asJSON, jobs: jobs}
		if plants != "" {
			opt.plants = strings.Split(plants, ",")
		}
		if set["seeds"] {
			if seeds < 1 {
				return usagef("--seeds %d: want N ≥ 1", seeds)
			}
			if jobs < 1 {
				return usagef("--jobs %d: want J ≥ 1", jobs)
			}
			return runSuiteSeeds(ctx, env, opt, seeds, runSuitePlant)
		}
		if set["jobs"] {
			return usagef("--jobs goes with --suite --seeds")
		}
		return runSuite(ctx, env, opt)
	}
	if config != "" || plants != "" || days != 0 || asJSON || set["seeds"] || set["jobs"] {
		return usagef("--config, --plants, --days, --seeds, --jobs and --json go with --suite")
	}
	if out == "" {
		return usagef("--out DIR is required")
	}
	var s *sim.Scenario
	if scenario == "" {
		s, err = sim.Demo()
	} else {
		s, err = sim.Load(scenario)
	}
	if err != nil {
		var le *sim.LoadError
		if errors.As(err, &le) {
			return configError{err}
		}
		return usagef("%v", err)
	}
	if duration < 0 || duration > s.Duration {
		return usagef("--duration %v: want 0 < D ≤ the scenario's %v", duration, s.Duration)
	}
	if duration > 0 {
		s = s.Head(duration) // all normal days when it ends before the split: one file
	}
	files, err := s.WriteFiles(out, gz)
	if err != nil {
		return err
	}
	tr := s.Truth()
	if files.Readings == "" {
		fmt.Fprintf(env.Out, "wrote %s (%s of normal operation from %s, every %s), %s (the %s after it) and %s (%d labelled episode(s))\n",
			files.Normal, s.Split.Sub(s.Start), s.Start.Format(time.RFC3339), s.Period, files.Test, s.End().Sub(s.Split), files.Truth, len(tr.Episodes))
		return nil
	}
	fmt.Fprintf(env.Out, "wrote %s (%s from %s, every %s) and %s (%d labelled episode(s))\n",
		files.Readings, s.Duration, s.Start.Format("2006-01-02T15:04:05Z07:00"), s.Period, files.Truth, len(tr.Episodes))
	return nil
}
