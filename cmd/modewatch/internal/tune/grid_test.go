package tune

import (
	"errors"
	"strconv"
	"strings"
	"testing"
	"time"

	"modewatch/configs"
)

func TestParseGrid(t *testing.T) {
	src := `# comment
on_delay: ["3/5", " 8 / 10 "]
sparsity: [none, "l0:4"]
halflife: 3d
modes: [3, "auto:0.75"]
alpha: [1e-3]
`
	g, err := ParseGrid("g.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	// Axes follow the order of Keys, not of the file.
	var keys []string
	for _, ax := range g.Axes {
		keys = append(keys, ax.Key+"="+strings.Join(ax.Values, "|"))
	}
	want := "sparsity=none|l0:4 modes=3|auto:0.75 halflife=3d alpha=0.001 on_delay=3/5|8/10"
	if got := strings.Join(keys, " "); got != want {
		t.Errorf("axes %s\nwant  %s", got, want)
	}
	if g.Size() != 8 {
		t.Errorf("size %d, want 2·2·1·1·2 = 8", g.Size())
	}
	ss := g.Settings()
	// First axis slowest, last fastest (nested loops in Keys order).
	if ss[0].String() != "sparsity=none modes=3 halflife=3d alpha=0.001 on_delay=3/5" ||
		ss[1].Value("on_delay") != "8/10" || ss[2].Value("modes") != "auto:0.75" || ss[4].Value("sparsity") != "l0:4" || ss[7].Index != 7 {
		t.Errorf("settings order: %v", ss)
	}

	base := &configs.Config{Units: []configs.Unit{{Name: "boiler", Model: configs.Model{Sparsity: "l0:2", Alpha: 0.05}, Alerts: configs.Alerts{OnDelay: configs.OnDelay{N: 1, M: 1}}}}}
	base.ApplyDefaults()
	c := ss[7].Apply(base)
	if err := c.Validate(); err != nil {
		t.Fatal(err)
	}
	u := c.UnitModel(0)
	if u.Sparsity != "l0:4" || u.Modes.Share != 0.75 || u.HalfLife != 72*time.Hour || u.Alpha != 0.001 {
		t.Errorf("unit model %+v", u)
	}
	if a := c.UnitAlerts(0); a.OnDelay != (configs.OnDelay{N: 8, M: 10}) {
		t.Errorf("unit alerts %+v", a.OnDelay)
	}
	if base.Units[0].Model.Sparsity != "l0:2" || base.Units[0].Alerts.OnDelay.N != 1 {
		t.Error("Apply changed the base configuration")
	}
	c = ss[0].Apply(base)
	if m := c.UnitModel(0); m.Modes.Count != 3 || m.MaxModes < 3 {
		t.Errorf("modes 3: %+v", m)
	}
}

// TestParseGridErrors checks that every problem of a broken grid is
// reported at once with its line and column.
func TestParseGridErrors(t *testing.T) {
	src := `sparsity: ["l0:4", "l9", "l0:4"]
colour: [red]
alpha: [0.01, 0.7]
on_delay: ["6/5", "3/5"]
modes: []
halflife: [{a: 1}, 0s]
adapt: [maybe]
alpha: [0.02]
`
	_, err := ParseGrid("bad.yaml", []byte(src))
	var es configs.Errors
	if !errors.As(err, &es) || !errors.Is(err, configs.ErrInvalid) {
		t.Fatalf("got %v, want configs.Errors", err)
	}
	want := []string{
		"bad.yaml:1:20: sparsity[1]:",            // l9: unknown sparsity
		"bad.yaml:1:26: sparsity[2]: value l0:4", // duplicate
		"bad.yaml:2:1: colour: unknown setting",
		"bad.yaml:3:15: alpha[1]:",
		"bad.yaml:4:12: on_delay[0]:",
		"bad.yaml:5:8: modes: empty list",
		"bad.yaml:6:12: halflife[0]: want a single value",
		"bad.yaml:6:20: halflife[1]: a duration must be above zero",
		"bad.yaml:7:9: adapt[0]:",
		"bad.yaml:8:1: alpha: listed twice (first at line 3)",
	}
	if len(es) != len(want) {
		t.Errorf("%d problems, want %d:\n%v", len(es), len(want), err)
	}
	for i, w := range want {
		if i < len(es) && !strings.HasPrefix(es[i].Error(), w) {
			t.Errorf("problem %d: %q, want prefix %q", i, es[i].Error(), w)
		}
	}

	for name, src := range map[string]string{
		"syntax":    "alpha: [0.01\nmodes: 3\n",
		"empty":     "",
		"not a map": "- 1\n- 2\n",
		"too big":   "alpha: [0.1, 0.2, 0.3, 0.4, 0.05, 0.06, 0.07, 0.08, 0.09, 0.011]\nwarmup: [" + seq(2, 1003) + "]\n",
	} {
		if _, err := ParseGrid("x.yaml", []byte(src)); err == nil || !errors.Is(err, configs.ErrInvalid) {
			t.Errorf("%s: got %v", name, err)
		} else if name == "syntax" && !strings.HasPrefix(err.(configs.Errors)[0].Error(), "x.yaml:") {
			t.Errorf("syntax error without a place: %v", err)
		}
	}
}

func seq(from, to int) string {
	parts := make([]string, 0, to-from)
	for i := from; i < to; i++ {
		parts = append(parts, strconv.Itoa(i))
	}
	return strings.Join(parts, ", ")
}
