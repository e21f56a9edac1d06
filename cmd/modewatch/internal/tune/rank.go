package tune

import (
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
)

// Result is the outcome of replaying one setting.
type Result struct {
	Setting Setting
	Metrics evaluate.Metrics
	Frames  uint64
	Alerts  int    // incidents raised (floods excluded)
	Err     string // why the replay failed; the metrics are then empty
	Rank    int    // 1-based, after Rank
	Pareto  bool   // on the Pareto front, after Rank
}

// Evaluator replays one setting and returns its result. It is called
// concurrently from several goroutines.
type Evaluator func(ctx context.Context, s Setting) Result

// Run evaluates every setting with jobs goroutines (jobs ≤ 0: GOMAXPROCS)
// and returns the results in grid order. done, if set, is called after each
// setting (from the worker goroutines, serialised). Run stops early when
// ctx is done and returns ctx's error with the results so far (unfinished
// settings have Err set).
func Run(ctx context.Context, settings []Setting, jobs int, eval Evaluator, done func(r Result)) ([]Result, error) {
	if jobs <= 0 {
		jobs = runtime.GOMAXPROCS(0)
	}
	jobs = min(jobs, len(settings))
	out := make([]Result, len(settings))
	for i, s := range settings {
		out[i] = Result{Setting: s, Err: "not run"}
	}
	next := make(chan int)
	var wg sync.WaitGroup
	var mu sync.Mutex
	for w := 0; w < jobs; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				r := eval(ctx, settings[i])
				r.Setting = settings[i]
				mu.Lock()
				out[i] = r
				if done != nil {
					done(r)
				}
				mu.Unlock()
			}
		}()
	}
	var err error
feed:
	for i := range settings {
		select {
		case next <- i:
		case <-ctx.Done():
			err = ctx.Err()
			break feed
		}
	}
	close(next)
	wg.Wait()
	return out, err
}

// Objectives of one result for ranking and the Pareto front; undefined
// values sort last.
type objectives struct {
	ok        bool    // the replay ran
	detection float64 // detection rate, 0 without episodes
	falseDay  float64 // false alerts per day (+Inf when undefined)
	delay     float64 // median delay in seconds (+Inf when nothing detected)
	isolated  int
}

func objectivesOf(r *Result) objectives {
	o := objectives{ok: r.Err == "", falseDay: math.Inf(1), delay: math.Inf(1), isolated: r.Metrics.IsolatedTop3}
	if m := r.Metrics; o.ok {
		if m.DetectionRate != nil {
			o.detection = *m.DetectionRate
		}
		if m.FalseAlertsPerDay != nil {
			o.falseDay = *m.FalseAlertsPerDay
		}
		if m.MedianDelayS != nil {
			o.delay = *m.MedianDelayS
		}
	}
	return o
}

// RankRule is the ranking rule, for help texts and reports.
const RankRule = `Ranking: settings whose replay failed come last. The others are ordered by
  1. within the false-alert budget (false alerts per day ≤ --max-false-per-day) first,
  2. higher detection rate,
  3. more episodes isolated (an episode channel among the first alert's top 3),
  4. shorter median delay,
  5. fewer false alerts per day,
  6. grid order.
The Pareto front (marked *) holds the settings that no other setting beats
on all four of detection rate, false alerts per day, median delay and
isolated_top3 while being strictly better on at least one.`

// Rank orders results by RankRule with the false-alert budget maxFalse
// per day, sets Rank and Pareto, and returns them sorted (best first).
// The input slice is reordered.
func Rank(results []Result, maxFalse float64) []Result {
	obj := make(map[int]objectives, len(results))
	for i := range results {
		obj[results[i].Setting.Index] = objectivesOf(&results[i])
	}
	sort.SliceStable(results, func(i, j int) bool {
		a, b := obj[results[i].Setting.Index], obj[results[j].Setting.Index]
		if a.ok != b.ok {
			return a.ok
		}
		ia, ib := a.falseDay <= maxFalse, b.falseDay <= maxFalse
		switch {
		case ia != ib:
			return ia
		case a.detection != b.detection:
			return a.detection > b.detection
		case a.isolated != b.isolated:
			return a.isolated > b.isolated
		case a.delay != b.delay:
			return a.delay < b.delay
		case a.falseDay != b.falseDay:
			return a.falseDay < b.falseDay
		}
		return results[i].Setting.Index < results[j].Setting.Index
	})
	for i := range results {
		results[i].Rank = i + 1
		a := obj[results[i].Setting.Index]
		if !a.ok {
			continue
		}
		results[i].Pareto = true
		for j := range results {
			if i == j {
				continue
			}
			b := obj[results[j].Setting.Index]
			if b.ok && dominates(b, a) {
				results[i].Pareto = false
				break
			}
		}
	}
	return results
}

// dominates reports whether b is at least as good as a on every objective
// and strictly better on one.
func dominates(b, a objectives) bool {
	if b.detection < a.detection || b.falseDay > a.falseDay || b.delay > a.delay || b.isolated < a.isolated {
		return false
	}
	return b.detection > a.detection || b.falseDay < a.falseDay || b.delay < a.delay || b.isolated > a.isolated
}

// Meets reports whether r detects every episode within the false-alert
// budget.
func Meets(r *Result, maxFalse float64) bool {
	o := objectivesOf(r)
	return o.ok && r.Metrics.Episodes > 0 && r.Metrics.Detected == r.Metrics.Episodes && o.falseDay <= maxFalse
}

func fmtDelay(p *float64) string {
	if p == nil {
		return "-"
	}
	return (time.Duration(*p) * time.Second).String()
}

func fmtRate(p *float64, prec int) string {
	if p == nil {
		return "-"
	}
	return strconv.FormatFloat(*p, 'f', prec, 64)
}

// WriteTable prints the ranked results as an aligned text table: at most
// top rows (all if top ≤ 0).
func WriteTable(w io.Writer, ranked []Result, top int) error {
	if len(ranked) == 0 {
		return nil
	}
	head := []string{"rank", "pareto"}
	head = append(head, ranked[0].Setting.Keys...)
	head = append(head, "detected", "rate", "false/day", "median_delay", "isolated_top3", "alerts")
	rows := [][]string{head}
	for i, r := range ranked {
		if top > 0 && i >= top {
			break
		}
		row := []string{strconv.Itoa(r.Rank), ""}
		if r.Pareto {
			row[1] = "*"
		}
		row = append(row, r.Setting.Texts...)
		if r.Err != "" {
			row = append(row, "error: "+r.Err)
			rows = append(rows, row)
			continue
		}
		m := r.Metrics
		row = append(row, fmt.Sprintf("%d/%d", m.Detected, m.Episodes), fmtRate(m.DetectionRate, 3),
			fmtRate(m.FalseAlertsPerDay, 2), fmtDelay(m.MedianDelayS), strconv.Itoa(m.IsolatedTop3), strconv.Itoa(r.Alerts))
		rows = append(rows, row)
	}
	width := make([]int, len(head))
	for _, row := range rows {
		for i, c := range row {
			if len(row) == len(head) || i < len(row)-1 { // an error row's last cell spans the metrics
				width[i] = max(width[i], len([]rune(c)))
			}
		}
	}
	var b strings.Builder
	for _, row := range rows {
		for i, c := range row {
			if i == len(row)-1 {
				b.WriteString(c)
				break
			}
			b.WriteString(c)
			b.WriteString(strings.Repeat(" ", width[i]-len([]rune(c))+2))
		}
		b.WriteByte('\n')
	}
	if top > 0 && len(ranked) > top {
		fmt.Fprintf(&b, "(%d more in the CSV)\n", len(ranked)-top)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// WriteCSV writes every result, ranked, with a header row. Undefined
// values are empty cells.
func WriteCSV(w io.Writer, ranked []Result) error {
	cw := csv.NewWriter(w)
	if len(ranked) == 0 {
		cw.Flush()
		return cw.Error()
	}
	head := []string{"rank", "pareto"}
	head = append(head, ranked[0].Setting.Keys...)
	head = append(head, "episodes", "detected", "detection_rate", "false_alerts", "false_alerts_per_day",
		"median_delay_s", "isolated_top3", "alerts", "frames", "error")
	cw.Write(head)
	num := func(p *float64) string {
		if p == nil {
			return ""
		}
		return strconv.FormatFloat(*p, 'g', -1, 64)
	}
	for _, r := range ranked {
		m := r.Metrics
		row := []string{strconv.Itoa(r.Rank), strconv.FormatBool(r.Pareto)}
		row = append(row, r.Setting.Texts...)
		row = append(row, strconv.Itoa(m.Episodes), strconv.Itoa(m.Detected), num(m.DetectionRate),
			strconv.Itoa(m.FalseAlerts), num(m.FalseAlertsPerDay), num(m.MedianDelayS), strconv.Itoa(m.IsolatedTop3),
			strconv.Itoa(r.Alerts), strconv.FormatUint(r.Frames, 10), r.Err)
		cw.Write(row)
	}
	cw.Flush()
	return cw.Error()
}
