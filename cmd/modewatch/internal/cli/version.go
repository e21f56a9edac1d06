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
