package tune

import (
	"fmt"
	"io"
	"strconv"
	"strings"
)

// WriteSnippet writes the setting of r as a configuration snippet (YAML
// that "modewatch check" accepts): a model section and an alerts section
// holding the keys the grid listed, preceded by the comment lines of note
// (each prefixed with "# ").
func WriteSnippet(w io.Writer, r *Result, note []string) error {
	var b strings.Builder
	for _, l := range note {
		b.WriteString(strings.TrimRight("# "+l, " "))
		b.WriteByte('\n')
	}
	s := r.Setting
	var model, alerts []string
	for i, k := range s.Keys {
		v := s.vals[i]
		switch k {
		case "sparsity", "modes":
			model = append(model, fmt.Sprintf("  %s: %s", k, strconv.Quote(v.text)))
		case "halflife", "alpha", "warmup", "refresh_every", "adapt":
			model = append(model, fmt.Sprintf("  %s: %s", k, v.text))
		case "on_delay":
			alerts = append(alerts, fmt.Sprintf("  on_delay: {n: %d, m: %d}", v.od.N, v.od.M))
		case "off_delay", "deadband":
			alerts = append(alerts, fmt.Sprintf("  %s: %s", k, v.text))
		}
	}
	if len(model) > 0 {
		b.WriteString("model:\n")
		b.WriteString(strings.Join(model, "\n"))
		b.WriteByte('\n')
	}
	if len(alerts) > 0 {
		b.WriteString("alerts:\n")
		b.WriteString(strings.Join(alerts, "\n"))
		b.WriteByte('\n')
	}
	_, err := io.WriteString(w, b.String())
	return err
}
