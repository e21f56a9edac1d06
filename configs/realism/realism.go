// Package realism embeds the realism suite: invented plants, each a sim
// scenario (one YAML file per plant) of at least seven normal days followed
// by at least five test days with labelled faults, on which "modewatch sim
// --suite" measures modewatch as a new user would meet it (fit on the
// normal days, replay the test days, default settings). The plants are
// data; the generator and its realism checks live in package sim.
package realism

import (
	"embed"
	"io/fs"
	"sort"
	"strings"
)

//go:embed *.yaml
var files embed.FS

// Plant is one scenario file of the suite.
type Plant struct {
	Name string // file name without .yaml, e.g. "compressor-station"
	File string // file name, e.g. "compressor-station.yaml"
	YAML []byte
}

// Plants returns the suite's scenarios, sorted by name.
func Plants() []Plant {
	names, _ := fs.Glob(files, "*.yaml") // the pattern is valid
	sort.Strings(names)
	out := make([]Plant, 0, len(names))
	for _, n := range names {
		b, _ := files.ReadFile(n) // listed by Glob from the embedded set
		out = append(out, Plant{Name: strings.TrimSuffix(n, ".yaml"), File: n, YAML: b})
	}
	return out
}
