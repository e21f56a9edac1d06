// Command modewatch watches a plant's sensor streams, learns their joint
// normal behaviour as a few sparse modes, scores every frame by T² and SPE
// against control limits and raises advisory alerts naming the sensors
// behind a deviation. Run "modewatch help" for the commands.
//
// This file only turns the process into a call of cli.Main; the commands
// live in package cli and the pipeline in packages under internal/.
package main

import (
	"context"
	"os"
	"os/signal"
	"syscall"

	"modewatch/cmd/modewatch/internal/cli"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := cli.Main(ctx, os.Args[1:], cli.IO{In: os.Stdin, Out: os.Stdout, Err: os.Stderr, Signals: stop})
	stop()
	os.Exit(code)
}
