package cli

import (
	"context"
	"errors"
	"fmt"

	"modewatch/configs"
)

func init() {
	register(command{name: "check", args: "--config FILE", summary: "validate a configuration and print every problem with its location", run: runCheck})
}

func runCheck(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "check", "--config FILE", `
Check a service configuration: YAML syntax, unknown keys, bad values and
consistency (a channel in one unit only, valid subjects, ranges, ...) and
that the files it names (model, TLS, credentials, inputs) can be read.
Every problem is printed on its own line as FILE:LINE:COLUMN: key: message.
Exit status 0 when the file is valid, 2 when it has problems.`)
	var file string
	fs.StringVar(&file, "config", "", "configuration `FILE` to check (required)")
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	if file == "" && len(pos) == 1 {
		file = pos[0]
	} else if len(pos) > 0 {
		return usagef("unexpected arguments %q", pos)
	}
	if file == "" {
		return usagef("--config FILE is required")
	}
	c, err := configs.Load(file)
	if err == nil {
		err = c.CheckFiles() // files it names must be readable
	}
	if err != nil {
		var es configs.Errors
		if errors.As(err, &es) {
			for _, e := range es {
				fmt.Fprintln(env.Out, e)
			}
			return configError{fmt.Errorf("%s: %d problem(s)", file, len(es))}
		}
		return usagef("%v", err)
	}
	source := "embedded server"
	if len(c.Server.URLs) > 0 {
		source = fmt.Sprintf("%d server URL(s)", len(c.Server.URLs))
	}
	channels := fmt.Sprintf("%d mapped channel(s)", len(c.Channels))
	if len(c.Channels) == 0 {
		channels = "auto-discovered channels"
	}
	fmt.Fprintf(env.Out, "%s: ok (%d unit(s), %s, %s, HTTP %s)\n", file, len(c.Units), channels, source, c.HTTP.Listen)
	return nil
}
