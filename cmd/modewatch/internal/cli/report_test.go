package cli

import (
	"bytes"
	"encoding/xml"
	"errors"
	"io"
	"io/fs"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/report"
)

// xmlElements parses b as XML (strict, as an XHTML parser would) and
// returns its start elements.
func xmlElements(t *testing.T, name string, b []byte) []xml.StartElement {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(b))
	d.Strict = true
	var out []xml.StartElement
	depth := 0
	for {
		tok, err := d.Token()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatalf("%s is not well-formed: %v", name, err)
		}
		switch x := tok.(type) {
		case xml.StartElement:
			out = append(out, x.Copy())
			depth++
		case xml.EndElement:
			depth--
		}
	}
	if depth != 0 || len(out) == 0 {
		t.Fatalf("%s: unbalanced or empty document", name)
	}
	return out
}

func attr(e xml.StartElement, name string) (string, bool) {
	for _, a := range e.Attr {
		if a.Name.Local == name {
			return a.Value, true
		}
	}
	return "", false
}

// TestReplayReport writes a report of a demo replay with a truth file and
// checks it: index.html is well-formed (parsed as XML, which is stricter
// than HTML), every link and image points to a file the report wrote (or
// an anchor on the page), nothing is fetched from elsewhere, every SVG is
// well-formed XML with an svg root, the report holds the summary figures,
// one alert row per alert, the labelled episodes and the advisory caution.
func TestReplayReport(t *testing.T) {
	log, truth := demoWithTruth(t, 40)
	dir := filepath.Join(t.TempDir(), "report")
	code, js, errs := runCLI(t, "", "replay", "--truth", truth, "--json", "--report", dir, log)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	sum := decodeSummary(t, js)
	index := filepath.Join(dir, "index.html")
	page, err := os.ReadFile(index)
	if err != nil {
		t.Fatal(err)
	}
	els := xmlElements(t, "index.html", page)
	if els[0].Name.Local != "html" {
		t.Errorf("root element %s", els[0].Name.Local)
	}
	ids := map[string]bool{}
	for _, e := range els {
		if id, ok := attr(e, "id"); ok {
			ids[id] = true
		}
	}
	linked := map[string]bool{}
	var alertRows, svgImgs int
	inAlerts := false
	for _, e := range els {
		switch e.Name.Local {
		case "script", "link", "iframe", "object", "embed":
			t.Errorf("report uses <%s>", e.Name.Local)
		case "h2":
			id, _ := attr(e, "id")
			inAlerts = id == "alerts"
		case "tr":
			if inAlerts {
				alertRows++
			}
		}
		for _, a := range []string{"href", "src"} {
			v, ok := attr(e, a)
			if !ok {
				continue
			}
			u, err := url.Parse(v)
			if err != nil || u.Scheme != "" || u.Host != "" || strings.HasPrefix(v, "/") || strings.Contains(v, "..") {
				t.Errorf("%s=%q does not point into the report", a, v)
				continue
			}
			if strings.HasPrefix(v, "#") {
				if !ids[v[1:]] {
					t.Errorf("anchor %s has no target", v)
				}
				continue
			}
			if _, err := os.Stat(filepath.Join(dir, filepath.FromSlash(v))); err != nil {
				t.Errorf("%s=%q: %v", a, v, err)
			}
			linked[v] = true
			if strings.HasSuffix(v, ".svg") {
				svgImgs++
			}
		}
	}
	if strings.Contains(string(page), "url(") || strings.Contains(string(page), "@import") {
		t.Error("the style sheet fetches something")
	}
	// The header row plus one row per alert.
	if alertRows != sum.Alerts+1 {
		t.Errorf("alert table has %d rows, want %d alerts + header", alertRows, sum.Alerts)
	}
	// Every file the report wrote is linked, and every SVG parses.
	var files int
	filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		rel = filepath.ToSlash(rel)
		files++
		if rel == "index.html" {
			return nil
		}
		if !linked[rel] {
			t.Errorf("%s is written but not linked", rel)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		if svg := xmlElements(t, rel, b); svg[0].Name.Local != "svg" {
			t.Errorf("%s: root %s", rel, svg[0].Name.Local)
		}
		return nil
	})
	// 4 units × (3 statistics + heat map) charts at least, plus modes.
	if svgImgs < 16 || files != svgImgs+1 {
		t.Errorf("%d SVG images linked, %d files", svgImgs, files)
	}
	text := string(page)
	for _, want := range []string{report.Advisory[:40], "site procedures, local codes and licensed practice",
		">frames<", ">accepted<", ">Input lines<", ">replay time<", `&#34;lines&#34;: {`, "F1-header-bias", "detection rate", "downsampled", "of their own unit"} {
		if !strings.Contains(text, want) {
			t.Errorf("index.html lacks %q", want)
		}
	}
	// The strict per-unit figures, one row per unit.
	for _, u := range sum.Metrics.Units {
		if !strings.Contains(text, ">unit "+u.Unit+"<") {
			t.Errorf("index.html lacks the metrics row of unit %s", u.Unit)
		}
	}
	if strings.Count(text, "of normal time; longest alert") != len(sum.Units) {
		t.Errorf("want one open-share figure per unit (%d)", len(sum.Units))
	}
}
