package cli

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"modewatch/alerts"
)

// suiteNotice is one informational record of a plant's test days (a new
// operating point, a new operating state): no alert, so the strict scorer
// leaves it out, and the suite lists it so that nothing the engine decided
// not to alert on is hidden.
type suiteNotice struct {
	ID    string `json:"id"`
	Group string `json:"group"` // alerts.GroupPoint, alerts.GroupState, ...
	Text  string `json:"text"`
}

// readNotices returns the notice records of the alert records file path,
// in the order written.
func readNotices(path string) ([]suiteNotice, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return scanNotices(f, path)
}

// scanNotices is readNotices reading from r (named path in errors).
func scanNotices(r io.Reader, path string) ([]suiteNotice, error) {
	out := []suiteNotice{}
	err := scanRecords(r, path, func(rec *alerts.Record) {
		if rec.Kind == alerts.KindNotice {
			out = append(out, suiteNotice{ID: rec.ID, Group: rec.Group, Text: rec.Notice})
		}
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// scanRecords calls fn with each alert record of the JSON-lines stream r
// (an alerts file, named path in errors with the line number).
func scanRecords(r io.Reader, path string, fn func(*alerts.Record)) error {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64<<10), 16<<20)
	for line := 1; sc.Scan(); line++ {
		var rec alerts.Record
		if err := json.Unmarshal(sc.Bytes(), &rec); err != nil {
			return fmt.Errorf("%s:%d: %w", path, line, err)
		}
		fn(&rec)
	}
	if err := sc.Err(); err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	return nil
}

// noticeCounts is "N" or "N (group n, ...)" for a plant's notices.
func noticeCounts(ns []suiteNotice) string {
	if len(ns) == 0 {
		return "0"
	}
	by := map[string]int{}
	var groups []string
	for _, n := range ns {
		if by[n.Group] == 0 {
			groups = append(groups, n.Group)
		}
		by[n.Group]++
	}
	slices.Sort(groups)
	parts := make([]string, len(groups))
	for i, g := range groups {
		parts[i] = fmt.Sprintf("%s %d", strings.ReplaceAll(g, "_", " "), by[g])
	}
	return fmt.Sprintf("%d (%s)", len(ns), strings.Join(parts, ", "))
}

// printSuiteNotices prints the line counting each plant's notices.
func printSuiteNotices(w io.Writer, rows []suiteRow) {
	parts := make([]string, 0, len(rows))
	for _, r := range rows {
		if r.Error == "" {
			parts = append(parts, r.Plant+" "+noticeCounts(r.Notices))
		}
	}
	fmt.Fprintf(w, "notices: informational records, no alert and not scored (a new operating point or state; listed in --json): %s\n",
		strings.Join(parts, ", "))
}
