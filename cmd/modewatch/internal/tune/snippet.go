package tune

import (
	"fmt"
	"io"
	"strings"

	"modewatch/configs"
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
		st := configs.LookupSetting(k)
		line := fmt.Sprintf("  %s: %s", st.Name, st.YAML(s.Texts[i]))
		if st.Section == "alerts" {
			alerts = append(alerts, line)
		} else {
			model = append(model, line)
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
