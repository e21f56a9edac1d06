// Package service runs modewatch as a long-running service: readings in
// from NATS (an embedded server when none is configured), one engine per
// plant unit, alerts and scores out on NATS subjects and alert sinks, an
// HTTP API for health, metrics, units and alerts, periodic atomic
// checkpoints restored on start, and a graceful shutdown under a deadline.
package service

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/alerts"
	"modewatch/alerts/control"
	"modewatch/alerts/sink"
	"modewatch/cmd/modewatch/internal/access"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/statuspage"
	"modewatch/configs"
	"modewatch/stream"
	"modewatch/stream/natsource"
)

// Options configure a Service.
type Options struct {
	Config *configs.Config
	Log    *slog.Logger
	// Stdout receives the stdout alert delivery (delivery.stdout); default os.Stdout.
	Stdout io.Writer
	// OnScore, if set, is also called for every unit and frame (from the
	// frame goroutine; it must be quick). The demo uses it for its summary.
	OnScore func(u *pipeline.Unit, t time.Time)
	// Prepare, if set, is called once the units are built and restored,
	// before the first reading (run uses it to set empirical limits).
	Prepare func(p *pipeline.Pipeline) error
}

// Info says where a started service can be reached.
type Info struct {
	HTTP     string // base URL of the HTTP API, "" when disabled
	NATS     string // URL of the NATS server the service uses
	Embedded bool   // the NATS server runs inside this process
	Readings []string
	Alerts   string // subject pattern of the alerts
	Scores   string // subject pattern of the scores
	Control  string // subject of operator commands
}

// Service is one running modewatch instance. Create it with Start.
type Service struct {
	cfg  *configs.Config
	opt  Options
	log  *slog.Logger
	info Info

	emb   *natsource.Embedded
	conn  *natsource.Conn
	pl    *pipeline.Pipeline
	in    *stream.Intake
	core  *natsource.CoreSub
	js    *natsource.JSConsumer
	sinks *sink.Set
	ctl   *control.Responder
	srv   *http.Server
	ln    net.Listener
	guard *access.Guard
	large chan struct{} // one token per large request being served
	met   *metrics
	hist  *statuspage.History // trends of the status page
	page  *statuspage.Page
	clu   *clusterPart                // nil unless cluster.instance is set
	cluOn atomic.Pointer[clusterPart] // clu, for the NATS event callback

	recMu  sync.Mutex
	recent map[string]alerts.Record // latest revision of recent records, by id
	recIDs []string                 // ids in order of first publication (bounded)

	scoreSubj map[string]string
	scoreEnc  pipeline.ScoreEncoder
	scoreErrs atomic.Uint64

	ackMu      sync.Mutex
	heldAcks   []func() error // JetStream acks waiting for the next checkpoint
	ackCap     int
	ckptNow    chan struct{}
	ckptMu     sync.Mutex
	lastCkpt   atomic.Int64 // unix ns of the last successful checkpoint
	ckptErrors atomic.Uint64
	ready      atomic.Bool

	// Wall-clock time each unit's latest frame was scored, for the alarm
	// timers of units whose frames stop (tickUnits).
	clockMu  sync.Mutex
	lastWall map[string]time.Time
	started  time.Time

	// Readings not consumed since (unix ns, 0: consumed); see stallLoop.
	stalledSince atomic.Int64
	failed       chan struct{}
	failErr      error
	recreations  atomic.Uint64

	stopOnce sync.Once
	wg       sync.WaitGroup
	done     chan struct{}
}

// Start starts every part of the service and returns once it is serving:
// the message server connection, the alert delivery, the engine (restored
// from its checkpoints), the intake, the operator commands, the readings,
// the HTTP API and, in a cluster, the unit leases; then the checkpoint,
// tick and stall loops. An error stops whatever had started. Stop the
// service with Shutdown (or cancel ctx and call Wait).
func Start(ctx context.Context, opt Options) (_ *Service, err error) {
	cfg, log := pipeline.OrDefaults(opt.Config, opt.Log)
	if opt.Stdout == nil {
		opt.Stdout = os.Stdout
	}
	s := &Service{cfg: cfg, opt: opt, log: log, scoreSubj: map[string]string{}, recent: map[string]alerts.Record{}, ckptNow: make(chan struct{}, 1), done: make(chan struct{}), failed: make(chan struct{}),
		lastWall: map[string]time.Time{}, started: time.Now(), hist: statuspage.NewHistory(0, 0, 0)}
	defer func() {
		if err != nil {
			s.abort()
		}
	}()

	var baseline *pipeline.ModelFile
	if cfg.Model.File != "" {
		if baseline, err = pipeline.ReadModel(cfg.Model.File); err != nil {
			return nil, err
		}
		// Said, not silently dropped: the file's units keep the model
		// settings they were fitted with.
		for _, k := range baseline.Kept(cfg) {
			log.Warn("a model setting of the configuration does not apply to units of the model file: they keep the value they were fitted with (fit again to change it)",
				"setting", "model."+k.Name, "configured", k.Configured, "fitted", k.Fitted, "units", strings.Join(k.Units, ","), "file", cfg.Model.File)
		}
	}
	period := cfg.Frames.Period
	if period == 0 && baseline != nil {
		period = time.Duration(baseline.Period)
	}
	if period == 0 {
		return nil, errors.New("service: frames.period is required for the live service (or model.file, whose period is used)")
	}
	if err := os.MkdirAll(cfg.StateDir, 0o755); err != nil {
		return nil, fmt.Errorf("service: data directory: %w", err)
	}

	if err := s.connect(ctx); err != nil {
		return nil, err
	}
	nc := s.conn.NATS()

	// Alert sinks: the alerts subject always, then the configured ones.
	if s.sinks, err = s.openSinks(nc); err != nil {
		return nil, err
	}

	// Channels, pipeline, intake.
	chans, err := stream.NewChannels(pipeline.ChannelSpecs(cfg), cfg.Frames.MaxChannels)
	if err != nil {
		return nil, fmt.Errorf("service: channel map: %w", err)
	}
	s.pl, err = pipeline.New(pipeline.Options{
		Config: cfg, Channels: chans, Period: period, Publisher: s, OnScore: s.onScore, Baseline: baseline,
		Log: log, Workers: pipeline.DefaultWorkers(),
	})
	if err != nil {
		return nil, err
	}
	var seeds []pipeline.LastReading
	if !cfg.Cluster.Enabled() { // in a cluster, units are restored as they are taken
		seeds = s.restore()
	}
	if opt.Prepare != nil {
		if err := opt.Prepare(s.pl); err != nil {
			return nil, err
		}
	}
	prec, err := pipeline.Precision(cfg.Frames.Precision)
	if err != nil {
		return nil, err
	}
	s.in, err = stream.NewIntake(chans, stream.Options{
		Align: pipeline.AlignConfig(cfg.Frames, period), Precision: prec, Log: log.With("component", "stream"),
		OnClockJump: s.pl.ClockJump,
	}, s.pl.Frame)
	if err != nil {
		return nil, err
	}
	s.seed(seeds)
	if len(cfg.Intake.Files) > 0 {
		if err := s.in.ReadFiles(ctx, cfg.Intake.Files...); err != nil {
			return nil, err
		}
		log.Info("files read before going live", "files", cfg.Intake.Files)
	}

	if err := s.listen(ctx); err != nil {
		return nil, err
	}

	// HTTP API.
	if err := s.serveHTTP(); err != nil {
		return nil, err
	}

	if cfg.Cluster.Enabled() {
		if err := s.startCluster(ctx, chans, stream.Options{Align: pipeline.AlignConfig(cfg.Frames, period), Precision: prec}); err != nil {
			return nil, err
		}
	}
	s.wg.Add(1)
	go s.checkpointLoop()
	every, stall := tickTiming(period, cfg.Frames.Lateness)
	s.wg.Add(1)
	go s.tickLoop(every, stall)
	s.wg.Add(1)
	go s.stallLoop()
	s.ready.Store(true)
	log.Info("modewatch is running (advisory: it never acts on the plant)", "readings", s.info.Readings,
		"alerts", s.info.Alerts, "scores", s.info.Scores, "http", s.info.HTTP, "period", period)
	return s, nil
}

// connect starts the embedded message server when no server URL is
// configured (with the configured users), and connects to the server.
func (s *Service) connect(ctx context.Context) (err error) {
	cfg, log := s.cfg, s.log
	urls := cfg.Server.URLs
	if len(urls) == 0 {
		port := cfg.Server.EmbeddedPort
		s.emb, err = natsource.StartEmbedded(ctx, natsource.EmbeddedConfig{
			Port: port, StoreDir: filepath.Join(cfg.StateDir, "jetstream"), Users: embeddedUsers(cfg),
		}, slog.New(minLevel{log.Handler(), slog.LevelWarn}).With("component", "nats-server"))
		if err != nil {
			return err
		}
		urls = []string{s.emb.ClientURL()}
		s.info.Embedded = true
		log.Info("embedded NATS server started", "url", s.emb.ClientURL(), "store", filepath.Join(cfg.StateDir, "jetstream"))
	}
	s.met = newMetrics(s)
	user, password := cfg.Server.User, cfg.Server.Password
	if s.emb != nil && len(cfg.Server.Users) > 0 {
		user, password = s.emb.ServiceUser()
	}
	s.conn, err = natsource.Connect(ctx, natsource.Options{
		URLs: urls, Name: cfg.Server.Name,
		User: user, Password: password, Token: cfg.Server.Token,
		NKeySeedFile: cfg.Server.NKeySeedFile, CredentialsFile: cfg.Server.CredentialsFile,
		TLS:     natsource.TLSOptions{CAFile: cfg.Server.TLS.CA, CertFile: cfg.Server.TLS.Cert, KeyFile: cfg.Server.TLS.Key},
		OnEvent: func(e natsource.Event) { s.met.natsEvent(e); s.clusterEvent(e) },
	}, log.With("component", "nats"))
	if err != nil {
		return err
	}
	s.info.NATS = urls[0]
	prefix := cfg.Server.Prefix
	s.info.Alerts = prefix + ".alerts.<unit>"
	s.info.Scores = prefix + ".scores.<unit>"
	s.info.Control = prefix + ".control"
	if s.perUser() {
		s.info.Control = prefix + ".control.<user>"
	}
	return nil
}

// perUser says whether each operator has a control subject of their own,
// so that a command's "by" is the authenticated user.
func (s *Service) perUser() bool {
	return len(s.cfg.Server.Users) > 0 || s.cfg.Server.ControlPerUser
}

// listen answers operator commands and starts the readings: in a cluster
// each owned unit gets its own consumer later (startCluster); otherwise a
// JetStream durable consumer when a stream is configured, core NATS
// subjects if not.
func (s *Service) listen(ctx context.Context) (err error) {
	cfg, log, nc, prefix := s.cfg, s.log, s.conn.NATS(), s.cfg.Server.Prefix
	// Operator commands on NATS.
	if s.perUser() { // each operator on its own subject: "by" is the user
		s.ctl, err = control.ListenPerUser(nc, prefix+".control", s.pl.Alerts(), log.With("component", "control"))
	} else {
		s.ctl, err = control.Listen(nc, s.info.Control, s.pl.Alerts(), log.With("component", "control"))
	}
	if err != nil {
		return err
	}

	// Readings.
	if cfg.Cluster.Enabled() {
		s.info.Readings = []string{"jetstream " + cfg.Intake.JetStream.Stream + ", one consumer per owned unit on " + cfg.Cluster.UnitSubject}
	} else if js := cfg.Intake.JetStream; js.Stream != "" {
		durable := js.Durable
		if durable == "" {
			durable = "modewatch"
		}
		s.ackCap = natsource.DefaultMaxAckPending
		jctx, cancel := context.WithTimeout(ctx, 30*time.Second)
		defer cancel()
		s.js, err = s.conn.ConsumeJetStream(jctx, natsource.JetStreamConfig{
			Stream: js.Stream, Durable: durable, FilterSubjects: cfg.Intake.Subjects,
			// Created if missing (capturing jetstream.subjects, default the
			// readings subjects); an existing stream is used as it is.
			CreateStream: len(js.Subjects) > 0, StreamSubjects: js.Subjects,
			StreamMaxAge: js.MaxAge, StreamMaxBytes: js.MaxBytes, NoReset: js.NoReset,
			// A consumer or stream deleted on the server is created again.
			Recreate: true, OnRecreate: s.onRecreate,
			MaxAckPending: s.ackCap,
			// Acknowledgements wait for the checkpoint that covers the
			// message (see heldAck), so the server must wait longer.
			AckWait: 2*cfg.CheckpointInterval + time.Minute,
		}, s.onJetStream)
		if err != nil {
			return err
		}
		s.info.Readings = []string{"jetstream " + js.Stream + "/" + durable}
	} else {
		sctx, cancel := context.WithTimeout(ctx, 10*time.Second)
		s.core, err = s.conn.SubscribeCore(sctx, natsource.CoreConfig{Subjects: cfg.Intake.Subjects,
			QueueMsgs: cfg.Intake.Queue.Messages, QueueBytes: cfg.Intake.Queue.Bytes}, s.onCore)
		cancel()
		if err != nil {
			return err
		}
		s.info.Readings = cfg.Intake.Subjects
	}
	return nil
}

// Info returns where the service can be reached.
func (s *Service) Info() Info { return s.info }

// Pipeline returns the engine (for tests and the demo).
func (s *Service) Pipeline() *pipeline.Pipeline { return s.pl }

// Intake returns the readings intake.
func (s *Service) Intake() *stream.Intake { return s.in }

// Conn returns the NATS connection.
func (s *Service) Conn() *natsource.Conn { return s.conn }

func (s *Service) openSinks(nc *nats.Conn) (*sink.Set, error) {
	cfg := s.cfg
	spool := cfg.Delivery.SpoolDir
	if err := os.MkdirAll(spool, 0o755); err != nil {
		return nil, fmt.Errorf("service: spool: %w", err)
	}
	var sinks []*sink.Sink
	add := func(name string, d sink.Deliverer) error {
		k, err := sink.New(d, sink.Options{Name: name, QueueLen: cfg.Delivery.Queue, SpoolDir: spool, Logger: s.log.With("target", name)})
		if err != nil {
			return err
		}
		sinks = append(sinks, k)
		return nil
	}
	natsSink, err := sink.NewNATS(nc, sink.NATSOptions{Subject: cfg.Server.Prefix + ".alerts.{unit}"})
	if err != nil {
		return nil, err
	}
	if err := add("nats-alerts", natsSink); err != nil {
		return nil, err
	}
	if cfg.Delivery.Subject != "" {
		d, err := sink.NewNATS(nc, sink.NATSOptions{Subject: cfg.Delivery.Subject})
		if err != nil {
			return nil, err
		}
		if err := add("nats-extra", d); err != nil {
			return nil, err
		}
	}
	if cfg.Delivery.Stdout {
		if err := add("stdout", sink.NewLines(s.opt.Stdout)); err != nil {
			return nil, err
		}
	}
	if cfg.Delivery.File != "" {
		d, err := sink.OpenLines(cfg.Delivery.File, false)
		if err != nil {
			return nil, err
		}
		if err := add("file", d); err != nil {
			return nil, err
		}
	}
	if cfg.Delivery.Webhook != "" {
		d, err := sink.NewWebhook(cfg.Delivery.Webhook, nil, nil)
		if err != nil {
			return nil, err
		}
		if err := add("webhook", d); err != nil {
			return nil, err
		}
	}
	return sink.NewSet(s.log.With("component", "delivery"), sinks...), nil
}

// restore loads the unit checkpoints of the data directory. It returns
// the restored units' carried readings, for seed.
func (s *Service) restore() []pipeline.LastReading {
	dir := filepath.Join(s.cfg.StateDir, "checkpoints")
	cks, errs := pipeline.ReadCheckpoints(dir)
	for _, err := range errs {
		s.log.Warn("checkpoint not usable; the unit warms up again", "err", err)
	}
	restored, rerrs := s.pl.Restore(cks)
	for _, err := range rerrs {
		s.log.Warn("checkpoint not restored", "err", err)
	}
	var seeds []pipeline.LastReading
	for _, ck := range cks {
		for _, name := range restored {
			if ck.Units[0].Name == name {
				s.log.Info("unit restored from checkpoint (model and alarm state)", "unit", name, "frames", ck.Frames, "last_frame", ck.To, "saved", ck.Created,
					"carried_readings", len(ck.Units[0].Last))
				seeds = append(seeds, ck.Units[0].Last...)
			}
		}
	}
	if len(cks) == 0 && len(errs) == 0 {
		if s.cfg.Model.File != "" {
			s.log.Info("no checkpoints: units start from the fitted model", "model", s.cfg.Model.File, "dir", dir)
		} else {
			s.log.Info("no checkpoints: every unit starts with a warm-up", "dir", dir)
		}
	}
	return seeds
}

// seed gives the aligner, before the first reading, the readings the
// restored units' last checkpointed frame carried, so that the frames after
// a restart carry them (within the staleness limit) as an uninterrupted run
// would. A reading that cannot be seeded (channel not in the registry yet)
// is logged; its channel is missing until its next reading, as before.
func (s *Service) seed(seeds []pipeline.LastReading) {
	for _, r := range seeds {
		if err := s.in.SeedLast(r.Channel, r.Value, r.Time); err != nil {
			s.log.Warn("carried reading of the checkpoint not restored; the channel waits for its next reading",
				"channel", r.Channel, "err", err)
		}
	}
}

// Adopt takes over a unit from its checkpoint (tracker and alarm state),
// e.g. a unit moved from another instance, while the service runs: the
// unit must not be running here yet, and the checkpoint must hold exactly
// the unit called name. Other units are not touched. The next checkpoint,
// asked for at once, includes the unit. Frames up to the checkpoint's last
// one are skipped when they come again.
func (s *Service) Adopt(ck *pipeline.ModelFile, name string) error {
	if len(ck.Units) != 1 || ck.Units[0].Name != name {
		return fmt.Errorf("service: the checkpoint must hold exactly unit %q", name)
	}
	restored, errs := s.pl.Restore([]*pipeline.ModelFile{ck})
	if len(restored) != 1 {
		err := errors.Join(errs...)
		s.log.Warn("unit checkpoint not taken over", "unit", name, "err", err)
		return fmt.Errorf("service: %w", err)
	}
	s.log.Info("unit taken over from a checkpoint (model and alarm state)", "unit", name, "frames", ck.Frames,
		"last_frame", ck.To, "saved", ck.Created)
	select {
	case s.ckptNow <- struct{}{}:
	default:
	}
	return nil
}

// onScore publishes a unit's score line on <prefix>.scores.<unit>.
func (s *Service) onScore(u *pipeline.Unit, t time.Time) {
	s.clockMu.Lock()
	s.lastWall[u.Name] = time.Now()
	s.clockMu.Unlock()
	s.recordHistory(u, t)
	subj, ok := s.scoreSubj[u.Name]
	if !ok {
		subj = s.cfg.Server.Prefix + ".scores." + sink.SubjectToken(u.Name)
		s.scoreSubj[u.Name] = subj
	}
	s.scoreEnc.Reset()
	b := s.scoreEnc.Append(u, t)
	if err := s.scoreEnc.Err(); err != nil {
		s.scoreErrs.Add(1)
	} else if err := s.conn.NATS().Publish(subj, b); err != nil {
		s.scoreErrs.Add(1)
	}
	if s.opt.OnScore != nil {
		s.opt.OnScore(u, t)
	}
}

func (s *Service) onCore(m natsource.Msg) error {
	_, err := s.in.Feed(m.Subject, m.Data)
	return err
}

// onJetStream feeds a JetStream message; its acknowledgement waits until
// the frames it contributed to are scored (FeedAck) and then until the
// next checkpoint holds them, so that after a crash the server delivers
// again exactly what the restored models have not seen.
func (s *Service) onJetStream(m natsource.Msg) error {
	err := s.in.FeedAck(m.Subject, m.Data, func() error { return s.holdAck(m.Ack) })
	return err
}

func (s *Service) holdAck(ack func() error) error {
	s.ackMu.Lock()
	s.heldAcks = append(s.heldAcks, ack)
	n := len(s.heldAcks)
	s.ackMu.Unlock()
	if n >= s.ackCap/2 {
		select { // ask for an early checkpoint before the server stops delivering
		case s.ckptNow <- struct{}{}:
		default:
		}
	}
	return nil
}

// Checkpoint writes every unit's checkpoint and then acknowledges the
// JetStream messages the checkpoint covers.
func (s *Service) Checkpoint() error {
	s.ckptMu.Lock()
	defer s.ckptMu.Unlock()
	s.ackMu.Lock()
	acks := s.heldAcks
	s.heldAcks = nil
	s.ackMu.Unlock()
	start := time.Now()
	n, err := s.pl.WriteCheckpoints(filepath.Join(s.cfg.StateDir, "checkpoints"))
	if err != nil {
		s.ckptErrors.Add(1)
		s.ackMu.Lock()
		s.heldAcks = append(acks, s.heldAcks...)
		s.ackMu.Unlock()
		s.log.Error("checkpoint failed", "err", err)
		return err
	}
	for _, ack := range acks {
		if aerr := ack(); aerr != nil {
			s.log.Warn("acknowledgement failed (the message will come again and be skipped)", "err", aerr)
		}
	}
	s.lastCkpt.Store(time.Now().UnixNano())
	s.log.Debug("checkpoint written", "units", n, "acked", len(acks), "took", time.Since(start))
	return nil
}

func (s *Service) checkpointLoop() {
	s.everyCheckpoint(s.ckptNow, func() { _ = s.Checkpoint() })
}

// everyCheckpoint calls save every checkpoint interval and whenever early
// receives, until the service stops; it is one goroutine of s.wg.
func (s *Service) everyCheckpoint(early <-chan struct{}, save func()) {
	defer s.wg.Done()
	t := time.NewTicker(s.cfg.CheckpointInterval)
	defer t.Stop()
	for {
		select {
		case <-s.done:
			return
		case <-t.C:
		case <-early:
		}
		save()
	}
}

// tickTiming returns how often the alarm timers of stalled units are
// advanced (the frame period, within 1 s … 10 s) and after how long without
// a scored frame a unit counts as stalled: two periods plus the allowed
// lateness, when its next frame is overdue even for a slow source.
func tickTiming(period, lateness time.Duration) (every, stall time.Duration) {
	every = min(max(period, time.Second), 10*time.Second)
	stall = max(2*period+lateness, every)
	return every, stall
}

// tickLoop advances the alarm timers of stalled units every interval.
func (s *Service) tickLoop(every, stall time.Duration) {
	defer s.wg.Done()
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		select {
		case <-s.done:
			return
		case now := <-t.C:
			s.tickUnits(now, stall)
		}
	}
}

// tickUnits advances the alarm time of every unit that has scored no frame
// for stall or longer to its latest frame time plus the wall-clock time
// elapsed since that frame was scored (alerts.Engine.Tick), so that shelves
// expire and floods and chattering end while its frames have stopped. The
// frame time so reached lags the plant's clock by the frame's period and
// lateness, never leads it. Units that score normally are not touched: for
// them frame time rules, as in a replay. It returns how many units ticked.
func (s *Service) tickUnits(now time.Time, stall time.Duration) int {
	eng := s.pl.Alerts()
	n := 0
	s.silenceUnseen(now)
	for _, u := range s.pl.Units() {
		// The frame time first: a frame scored between the two reads
		// moves the wall time too and the unit is not stalled.
		last := eng.LastFrame(u.Name)
		s.clockMu.Lock()
		wall, ok := s.lastWall[u.Name]
		s.clockMu.Unlock()
		if !ok {
			wall = s.started // restored from a checkpoint, no frame since
		}
		idle := now.Sub(wall)
		if last.IsZero() || idle < stall {
			continue
		}
		if eng.Tick(u.Name, last.Add(idle)) {
			n++
		}
		// No reading at all for longer than the staleness: the unit is
		// silent by the wall clock (its frames, which would show it, are
		// not formed while nothing arrives).
		if idle > s.pl.Staleness() {
			eng.Silence(u.Name, last.Add(idle))
		}
	}
	return n
}

// silenceUnseen raises the silent alert of every unit the service knows
// (from the configuration's units, the model file or a checkpoint) that has
// had no frame since start-up, once the run is older than the staleness
// limit: its gateway has been silent from the start, so no frame of it is
// ever formed. The alert is stamped with the plant's frame time as the
// other units show it (their latest frame plus the wall time since), or
// the wall clock when no unit has a frame; the unit's first frame closes
// it. In a cluster it does nothing: which units this instance should hear
// from is the lease holder's business, and a unit it takes is restored
// from its checkpoint (so it has frames).
func (s *Service) silenceUnseen(now time.Time) {
	if s.clu != nil || now.Sub(s.started) <= s.pl.Staleness() {
		return
	}
	eng := s.pl.Alerts()
	names := make(map[string]bool, len(s.cfg.Units))
	for i := range s.cfg.Units {
		names[s.cfg.Units[i].Name] = true
	}
	plant := time.Time{}
	for _, u := range s.pl.Units() {
		names[u.Name] = true
		s.clockMu.Lock()
		wall, ok := s.lastWall[u.Name]
		s.clockMu.Unlock()
		if last := eng.LastFrame(u.Name); ok && !last.IsZero() {
			if t := last.Add(now.Sub(wall)); t.After(plant) {
				plant = t
			}
		}
	}
	if plant.IsZero() {
		plant = now
	}
	for name := range names {
		if eng.LastFrame(name).IsZero() {
			eng.SilenceUnseen(name, plant)
		}
	}
}

// Wait blocks until ctx is done, then shuts the service down within the
// configured shutdown timeout.
func (s *Service) Wait(ctx context.Context) error {
	<-ctx.Done()
	sctx, cancel := context.WithTimeout(context.Background(), s.cfg.ShutdownTimeout)
	defer cancel()
	return s.Shutdown(sctx)
}

// Shutdown stops intake, drains NATS, scores what is queued, checkpoints,
// flushes the sinks and stops the HTTP API and the embedded server, all
// within ctx. It is idempotent.
func (s *Service) Shutdown(ctx context.Context) error {
	var errs []error
	s.stopOnce.Do(func() {
		s.log.Info("shutting down")
		s.ready.Store(false)
		errs = append(errs, s.stopCluster(ctx)) // hand units over first
		close(s.done)
		if s.core != nil {
			errs = append(errs, s.core.Stop(ctx))
			// Core NATS cannot redeliver: score the frames still pending.
			errs = append(errs, s.in.Flush())
		}
		if s.js != nil {
			// Unacknowledged messages come again after a restart.
			errs = append(errs, s.js.Stop(ctx))
		}
		if s.ctl != nil {
			errs = append(errs, s.ctl.Close(ctx))
		}
		errs = append(errs, s.Checkpoint())
		s.pl.Close()
		if s.sinks != nil {
			// Half the time left at most: the rest of the shutdown needs
			// some, and what is not delivered stays in the spools.
			sctx, cancel := halfway(ctx)
			errs = append(errs, s.sinks.Close(sctx))
			cancel()
		}
		if s.srv != nil {
			errs = append(errs, s.srv.Shutdown(ctx))
		}
		if s.conn != nil {
			if err := s.conn.Drain(ctx); err != nil && !errors.Is(err, natsource.ErrClosed) {
				errs = append(errs, err)
			}
		}
		if s.emb != nil {
			s.emb.Shutdown()
		}
		s.wg.Wait()
		waiting := 0
		if s.sinks != nil {
			waiting = s.sinks.Waiting()
		}
		s.log.Info("stopped", "records_waiting_in_spool", waiting)
	})
	return errors.Join(errs...)
}

// embeddedUsers turns the configured users of the embedded server into its
// users with their effective permissions.
func embeddedUsers(cfg *configs.Config) []natsource.EmbeddedUser {
	var out []natsource.EmbeddedUser
	for _, u := range cfg.Server.Users {
		out = append(out, natsource.EmbeddedUser{Name: u.Name, Password: u.Password, NKey: u.NKey,
			Publish: cfg.NATSPublish(u), Subscribe: cfg.NATSSubscribe(u)})
	}
	return out
}

// halfway returns a context that ends halfway between now and ctx's
// deadline (ctx itself when it has none).
func halfway(ctx context.Context) (context.Context, context.CancelFunc) {
	d, ok := ctx.Deadline()
	if !ok {
		return context.WithCancel(ctx)
	}
	return context.WithDeadline(ctx, time.Now().Add(time.Until(d)/2))
}

// abort releases what a failed Start had opened.
func (s *Service) abort() {
	if s.core != nil {
		_ = s.core.Stop(context.Background())
	}
	if s.js != nil {
		_ = s.js.Stop(context.Background())
	}
	if s.ctl != nil {
		_ = s.ctl.Close(context.Background())
	}
	if s.clu != nil {
		s.clu.cancel()
		<-s.clu.done
		s.clu.host.Stop(context.Background())
	}
	if s.pl != nil {
		s.pl.Close()
	}
	if s.sinks != nil {
		_ = s.sinks.Close(context.Background())
	}
	if s.ln != nil {
		s.ln.Close()
	}
	if s.conn != nil {
		s.conn.Close()
	}
	if s.emb != nil {
		s.emb.Shutdown()
	}
}

// alertsOpen returns the open alert records.
func (s *Service) alertsOpen() []alerts.Record { return s.pl.Alerts().Open(nil) }

// minLevel passes on records at or above min only (the embedded server
// is chatty at info level).
type minLevel struct {
	slog.Handler
	min slog.Level
}

func (h minLevel) Enabled(ctx context.Context, l slog.Level) bool {
	return l >= h.min && h.Handler.Enabled(ctx, l)
}

func (h minLevel) WithAttrs(a []slog.Attr) slog.Handler {
	return minLevel{h.Handler.WithAttrs(a), h.min}
}
func (h minLevel) WithGroup(n string) slog.Handler { return minLevel{h.Handler.WithGroup(n), h.min} }

// maxRecent bounds the records kept for Records and /api/alerts?all=1.
const maxRecent = 1000

// Publish hands a record revision to the sinks and keeps it for Records.
func (s *Service) Publish(r *alerts.Record) {
	s.recMu.Lock()
	if _, seen := s.recent[r.ID]; !seen {
		s.recIDs = append(s.recIDs, r.ID)
		if len(s.recIDs) > maxRecent {
			delete(s.recent, s.recIDs[0])
			s.recIDs = s.recIDs[1:]
		}
	}
	s.recent[r.ID] = *r
	s.recMu.Unlock()
	s.sinks.Publish(r)
}

// Records returns the latest revision of the recent incident records (at
// most 1000, floods and notices left out), open or closed, by start time.
func (s *Service) Records() []alerts.Record {
	s.recMu.Lock()
	defer s.recMu.Unlock()
	out := make([]alerts.Record, 0, len(s.recIDs))
	for _, id := range s.recIDs {
		if r := s.recent[id]; r.Kind == alerts.KindIncident {
			out = append(out, r)
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Start.Before(out[j].Start) })
	return out
}
