package cli

import (
	"context"
	"fmt"
	"runtime"
	"runtime/debug"
)

// Version is the release of modewatch; set at build time with
// -ldflags "-X modewatch/cmd/modewatch/internal/cli.Version=v1.2.3".
var Version = "dev"

func init() {
	register(command{name: "version", summary: "print the version", run: runVersion})
	register(command{name: "tune", args: "--input FILE... --truth FILE --grid FILE", summary: "search model settings against labelled incidents (not yet available)", run: runTune})
}

func runVersion(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "version", "", "Print the version of modewatch, the source revision and the Go version.")
	if _, err := parseAll(fs, args); err != nil {
		return err
	}
	rev := ""
	if bi, ok := debug.ReadBuildInfo(); ok {
		for _, s := range bi.Settings {
			switch s.Key {
			case "vcs.revision":
				rev = " " + s.Value
				if len(s.Value) > 12 {
					rev = " " + s.Value[:12]
				}
			case "vcs.modified":
				if s.Value == "true" {
					rev += "+modified"
				}
			}
		}
	}
	fmt.Fprintf(env.Out, "modewatch %s%s %s %s/%s\n", Version, rev, runtime.Version(), runtime.GOOS, runtime.GOARCH)
	return nil
}

func runTune(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "tune", "--input FILE... --truth FILE --grid FILE", `
Search model settings against labelled incidents. Not yet available in this
version: replay with --truth --json gives the metrics for one setting.`)
	if _, err := parseAll(fs, args); err != nil {
		return err
	}
	return usagef("tune is not yet available in this version; use replay --truth FILE --json for one setting at a time")
}
