package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// summaryGroup is one titled block of the summary table.
type summaryGroup struct {
	Title string
	Rows  []kv
}

// figure says how the summary shows one dotted key of replay --json.
type figure struct {
	group, label string
	show         func(string) string
}

// The groups of the summary, in page order.
const (
	groupRun     = "Run"
	groupLines   = "Input lines"
	groupAlerts  = "Alerts"
	groupScoring = "Against the labelled episodes"
	groupOther   = "Other figures"
)

var summaryGroupOrder = []string{groupRun, groupLines, groupAlerts, groupScoring, groupOther}

// summaryFigures labels the scalar figures of replay --json, in the order
// shown within each group. Figures not listed here are shown under
// groupOther with their key.
var summaryFigures = []struct {
	key string
	figure
}{
	{"from", figure{groupRun, "first frame", showText}},
	{"to", figure{groupRun, "last frame", showText}},
	{"period", figure{groupRun, "frame period", showText}},
	{"period_inferred", figure{groupRun, "period inferred from the data", showYesNo}},
	{"frames", figure{groupRun, "frames", showCount}},
	{"channels", figure{groupRun, "channels", showCount}},
	{"segments", figure{groupRun, "segments (clock jumps start a new one)", showCount}},
	{"elapsed_s", figure{groupRun, "replay time", showSeconds}},
	{"frames_per_second", figure{groupRun, "frames per second", showRate}},

	{"lines.total", figure{groupLines, "lines read", showCount}},
	{"lines.accepted", figure{groupLines, "accepted", showCount}},
	{"lines.rejected", figure{groupLines, "rejected", showCount}},
	{"lines.rejected_by_reason.syntax", figure{groupLines, "rejected: syntax error", showCount}},
	{"lines.rejected_by_reason.value", figure{groupLines, "rejected: bad field value", showCount}},
	{"lines.rejected_by_reason.too_long", figure{groupLines, "rejected: line too long", showCount}},
	{"lines.rejected_by_reason.no_time", figure{groupLines, "rejected: no timestamp", showCount}},
	{"lines.rejected_by_reason.time_range", figure{groupLines, "rejected: timestamp out of range", showCount}},
	{"lines.late", figure{groupLines, "readings too late for their frame", showCount}},
	{"lines.duplicate", figure{groupLines, "duplicate readings", showCount}},
	{"lines.out_of_range", figure{groupLines, "readings out of their channel's range", showCount}},
	{"lines.nonfinite", figure{groupLines, "readings not finite (NaN, ±Inf)", showCount}},
	{"lines.strings_ignored", figure{groupLines, "string fields ignored", showCount}},
	{"lines.refused_channels", figure{groupLines, "readings of channels refused (registry full)", showCount}},

	{"alerts", figure{groupAlerts, "incidents", showCount}},
	{"floods", figure{groupAlerts, "floods", showCount}},

	{"metrics.episodes", figure{groupScoring, "labelled episodes", showCount}},
	{"metrics.detected", figure{groupScoring, "detected", showCount}},
	{"metrics.detection_rate", figure{groupScoring, "detection rate", showPercent}},
	{"metrics.median_delay_s", figure{groupScoring, "median delay", showSeconds}},
	{"metrics.false_alerts", figure{groupScoring, "false alerts", showCount}},
	{"metrics.false_alerts_per_day", figure{groupScoring, "false alerts per day", showRate}},
	{"metrics.isolated_top3", figure{groupScoring, "faulty channel among the top three", showCount}},
}

// groupSummary sorts the flattened figures of replay --json into labelled,
// rounded rows by group, in summaryFigures order; figures it does not know
// go to groupOther under their key.
func groupSummary(flat []kv) []summaryGroup {
	byKey := make(map[string]string, len(flat))
	for _, r := range flat {
		byKey[r.Key] = r.Value
	}
	rows := map[string][]kv{}
	known := map[string]bool{}
	for _, f := range summaryFigures {
		known[f.key] = true
		if v, ok := byKey[f.key]; ok {
			rows[f.group] = append(rows[f.group], kv{f.label, f.show(v)})
		}
	}
	for _, r := range flat {
		if !known[r.Key] {
			rows[groupOther] = append(rows[groupOther], kv{r.Key, r.Value})
		}
	}
	var out []summaryGroup
	for _, g := range summaryGroupOrder {
		if len(rows[g]) > 0 {
			out = append(out, summaryGroup{g, rows[g]})
		}
	}
	return out
}

// rawJSON is v as indented JSON, for the page's raw view.
func rawJSON(v any) (string, error) {
	if v == nil {
		return "", nil
	}
	var b bytes.Buffer
	enc := json.NewEncoder(&b)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		return "", fmt.Errorf("report: summary: %w", err)
	}
	return b.String(), nil
}

func showText(v string) string { return v }

func showYesNo(v string) string {
	switch v {
	case "true":
		return "yes"
	case "false":
		return "no"
	}
	return v
}

// showCount groups the digits of an integer in threes ("1 234 567").
func showCount(v string) string {
	n, err := strconv.ParseInt(v, 10, 64)
	if err != nil {
		return v
	}
	s := strconv.FormatInt(max(n, -n), 10)
	var b strings.Builder
	if n < 0 {
		b.WriteByte('-')
	}
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteString("\u202f") // narrow no-break space
		}
		b.WriteRune(c)
	}
	return b.String()
}

// showSeconds shows a duration in seconds rounded to what a reader uses:
// milliseconds below 10 s, whole seconds below an hour, minutes above.
func showSeconds(v string) string {
	x, err := strconv.ParseFloat(v, 64)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return v
	}
	d := time.Duration(x * float64(time.Second))
	switch {
	case d < 10*time.Second:
		return d.Round(10 * time.Millisecond).String()
	case d < time.Hour:
		return d.Round(time.Second).String()
	default:
		return d.Round(time.Minute).String()
	}
}

// showRate rounds to three significant figures (whole numbers from 1000 on).
func showRate(v string) string {
	x, err := strconv.ParseFloat(v, 64)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return v
	}
	if math.Abs(x) >= 1000 {
		return showCount(strconv.FormatInt(int64(math.Round(x)), 10))
	}
	return strconv.FormatFloat(x, 'g', 3, 64)
}

// showPercent shows a fraction as a percentage with one decimal.
func showPercent(v string) string {
	x, err := strconv.ParseFloat(v, 64)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return v
	}
	return strconv.FormatFloat(100*x, 'f', 1, 64) + " %"
}
