package cli

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// runCLI runs modewatch in-process and returns its exit status and output.
func runCLI(t *testing.T, stdin string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	code = Main(context.Background(), args, IO{In: strings.NewReader(stdin), Out: &out, Err: &errb})
	return code, out.String(), errb.String()
}

func TestCheckBrokenConfig(t *testing.T) {
	cfg := filepath.Join("..", "..", "..", "..", "configs", "testdata", "broken.yaml")
	code, out, errs := runCLI(t, "", "check", "--config", cfg)
	if code != ExitUsage {
		t.Errorf("exit %d, want %d", code, ExitUsage)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	// configs/testdata/broken.yaml has 25 problems (see configs tests).
	if len(lines) != 25 {
		t.Errorf("got %d problem lines, want 25:\n%s", len(lines), out)
	}
	for _, l := range lines {
		if !strings.HasPrefix(l, cfg+":") {
			t.Errorf("line without location: %q", l)
		}
	}
	if !strings.Contains(errs, "25 problem(s)") {
		t.Errorf("stderr = %q", errs)
	}
}

// TestCheckRenamedKeys: "modewatch check" on a configuration written for
// an earlier release names each renamed key at its place and says what to
// write instead, and exits as for any other problem in the file.
func TestCheckRenamedKeys(t *testing.T) {
	cfg := filepath.Join(t.TempDir(), "config.yaml")
	old := "frames:\n  period: 10s\nsources:\n  subjects: [plant.>]\nsinks:\n  stdout: true\ndata_dir: /tmp/x\n"
	if err := os.WriteFile(cfg, []byte(old), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, _ := runCLI(t, "", "check", "--config", cfg)
	want := cfg + `:3:1: key "sources" was renamed: write "intake"` + "\n" +
		cfg + `:5:1: key "sinks" was renamed: write "delivery"` + "\n" +
		cfg + `:7:1: key "data_dir" was renamed: write "state_dir"` + "\n"
	if code != ExitUsage || out != want {
		t.Errorf("exit %d, output:\n%s\nwant exit %d and:\n%s", code, out, ExitUsage, want)
	}
}

func TestCheckGoodConfig(t *testing.T) {
	cfg := filepath.Join("..", "..", "..", "..", "configs", "modewatch.yaml")
	code, out, _ := runCLI(t, "", "check", "--config", cfg)
	if code != ExitOK || !strings.Contains(out, ": ok (1 unit(s)") {
		t.Errorf("exit %d, out %q", code, out)
	}
	code, _, errs := runCLI(t, "", "check", "--config", filepath.Join(t.TempDir(), "nope.yaml"))
	if code != ExitUsage || !strings.Contains(errs, "no such file") {
		t.Errorf("missing file: exit %d, %q", code, errs)
	}
}

func TestUsageAndHelp(t *testing.T) {
	if code, _, _ := runCLI(t, ""); code != ExitUsage {
		t.Errorf("no command: exit %d", code)
	}
	if code, _, _ := runCLI(t, "", "frobnicate"); code != ExitUsage {
		t.Errorf("unknown command: exit %d", code)
	}
	for _, c := range commands {
		code, out, _ := runCLI(t, "", c.name, "--help")
		if code != ExitOK || !strings.Contains(out, "Usage: modewatch "+c.name) {
			t.Errorf("%s --help: exit %d, out %q", c.name, code, out)
		}
	}
	if code, _, errs := runCLI(t, "", "check", "--no-such-flag"); code != ExitUsage || !strings.Contains(errs, "no-such-flag") {
		t.Errorf("bad flag: exit %d, %q", code, errs)
	}
	if code, out, _ := runCLI(t, "", "version"); code != ExitOK || !strings.HasPrefix(out, "modewatch ") {
		t.Errorf("version: %d %q", code, out)
	}
	if code, _, errs := runCLI(t, "", "tune"); code != ExitUsage || !strings.Contains(errs, "no input") {
		t.Errorf("tune: %d %q", code, errs)
	}
}

func TestModelFlagsOverride(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "c.yaml")
	os.WriteFile(cfg, []byte("model: {alpha: 0.05}\nunits:\n  - name: boiler\n    model: {alpha: 0.02, sparsity: \"l0:3\"}\n"), 0o644)
	var mf modelFlags
	fs := newFlags(IO{Out: &bytes.Buffer{}}, "x", "", "")
	mf.register(fs, true)
	if _, err := parseAll(fs, []string{"--config", cfg, "--alpha", "0.001", "--modes", "4", "--adapt=false"}); err != nil {
		t.Fatal(err)
	}
	c, err := mf.load(fs)
	if err != nil {
		t.Fatal(err)
	}
	m := c.ModelFor("boiler")
	if m.Alpha != 0.001 || m.Modes.Count != 4 || *m.Adapt || m.Sparsity != "l0:3" {
		t.Errorf("boiler model = %+v", m)
	}
	if d := c.ModelFor("other"); d.Alpha != 0.001 || *d.Adapt {
		t.Errorf("default model = %+v", d)
	}
	// Bad flag values are usage errors, all reported together.
	fs = newFlags(IO{Out: &bytes.Buffer{}}, "x", "", "")
	mf = modelFlags{}
	mf.register(fs, true)
	parseAll(fs, []string{"--alpha", "2", "--sparsity", "l9:1", "--halflife", "soon"})
	_, err = mf.load(fs)
	if err == nil || !strings.Contains(err.Error(), "--alpha") || !strings.Contains(err.Error(), "--sparsity") || !strings.Contains(err.Error(), "--halflife") {
		t.Errorf("got %v", err)
	}
}

func TestParseAllInterleaved(t *testing.T) {
	fs := newFlags(IO{Out: &bytes.Buffer{}}, "x", "", "")
	j := fs.Bool("json", false, "")
	pos, err := parseAll(fs, []string{"a.lp", "--json", "b.lp", "--", "--c.lp"})
	if err != nil || !*j || strings.Join(pos, " ") != "a.lp b.lp --c.lp" {
		t.Errorf("pos %q json %v err %v", pos, *j, err)
	}
}
