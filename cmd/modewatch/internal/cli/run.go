package cli

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"

	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/service"
	"modewatch/configs"
)

func init() {
	register(command{name: "run", args: "--config FILE", summary: "the live service: NATS in, per-unit models, alerts and scores out, HTTP API", run: runRun})
}

const runHelp = `
Run the live monitoring service. It subscribes to the readings subjects
(or a JetStream durable consumer), frames the readings, scores every frame
of every unit against its model, and publishes alerts (JSON) on
<prefix>.alerts.<unit> and scores (line protocol) on <prefix>.scores.<unit>,
also through the configured delivery targets. With no server URLs configured it
starts an embedded NATS server (JetStream stored in the state directory) on
the loopback address.

HTTP API (default ` + configs.DefaultListen + `): /healthz, /readyz, /metrics, /api/units,
/api/units/{unit}, /api/alerts, POST /api/alerts/{ack|shelve|unshelve},
POST /api/units/{unit}/maintenance.

Every unit is checkpointed to <state_dir>/checkpoints at the configured
interval and at shutdown, atomically, and restored on start. SIGINT or
SIGTERM stops intake, scores what is queued, checkpoints, flushes the delivery
queues and exits 0 within shutdown_timeout; a second signal exits at once.

frames.period is required (or model.file, whose period is used).
modewatch is advisory: it never acts on the plant.`

func runRun(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "run", "--config FILE", runHelp)
	var mf modelFlags
	mf.register(fs, true)
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	if len(pos) > 0 {
		return usagef("unexpected arguments %q", pos)
	}
	cfg, err := mf.load(fs)
	if err != nil {
		return err
	}
	var baseline *pipeline.ModelFile
	if cfg.Model.File != "" {
		if baseline, err = pipeline.ReadModel(cfg.Model.File); err != nil {
			return usagef("model.file: %v", err)
		}
	}
	prepare, err := empiricalLimits(cfg, baseline) // with a fixed fitted model only
	if err != nil {
		return err
	}
	log := serviceLogger(env, cfg)
	svc, err := service.Start(ctx, service.Options{Config: cfg, Log: log, Stdout: env.Out, Prepare: prepare})
	if err != nil {
		return err
	}
	info := svc.Info()
	fmt.Fprintf(env.Err, "modewatch running: readings %v via %s; alerts on %s, scores on %s; HTTP %s\n",
		info.Readings, info.NATS, info.Alerts, info.Scores, info.HTTP)
	select {
	case <-ctx.Done():
	case <-svc.Failed(): // readings not consumed for intake.stall_exit
		sctx, cancel := context.WithTimeout(context.Background(), cfg.ShutdownTimeout)
		defer cancel()
		return errors.Join(svc.Err(), svc.Shutdown(sctx))
	}
	if env.Signals != nil {
		env.Signals() // a second signal now ends the process at once
	}
	return svc.Wait(ctx)
}

// serviceLogger logs as configured (text or JSON) to standard error.
func serviceLogger(env IO, cfg *configs.Config) *slog.Logger {
	w := env.Err
	if w == nil {
		w = os.Stderr
	}
	return newLogger(w, cfg, false)
}
