// Package host runs the units a modewatch instance owns in a cluster: for
// each, a durable JetStream consumer filtered to the unit's subject, an
// aligner of its own, and its checkpoint in a JetStream object store. It
// implements cluster.Handler: the coordinator says which units to take and
// give up; the host restores, scores, saves and acknowledges.
//
// Acknowledgements follow the stored checkpoint: a message is acknowledged
// only once a checkpoint stored in the object store covers every frame it
// contributed to. A new owner's consumer starts again after the
// acknowledgement floor; the frames up to the checkpoint's last one are
// skipped (pipeline.Restore), so none is scored twice and none is missed.
package host

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"maps"
	"slices"
	"sync"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"modewatch/cmd/modewatch/internal/cluster"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/configs"
	"modewatch/stream"
	"modewatch/stream/natsource"
)

// Options configure a Host.
type Options struct {
	Conn     *natsource.Conn
	Pipeline *pipeline.Pipeline
	Channels *stream.Channels
	// Intake holds the alignment settings of each unit's intake (its
	// handler is replaced).
	Intake stream.Options
	// Stream is the JetStream stream of the readings; Durable the prefix
	// of the per-unit consumer names (<Durable>_<unit>).
	Stream, Durable string
	// Subject returns the subject of a unit's readings.
	Subject func(unit string) string
	// Store is the object store of the unit checkpoints.
	Store jetstream.ObjectStore
	// MaxAckPending and AckWait of each unit's consumer.
	MaxAckPending int
	AckWait       time.Duration
	Log           *slog.Logger
	// MaxChannels returns a unit's channel cap (model.max_channels), which
	// bounds the size of its stored checkpoint read on Gain; default
	// configs.DefaultUnitMaxChannels.
	MaxChannels func(unit string) int
	// Forfeit, if set, is called for a unit Resync could not start again
	// (cluster.Coordinator.Forfeit gives its lease up).
	Forfeit func(unit string)
}

// Host runs the owned units. Its methods are safe for concurrent use.
type Host struct {
	opt Options
	log *slog.Logger

	op sync.Mutex // one Gain, Release, Lose or Resync at a time
	// feed serialises the units' intakes: they share the channel registry,
	// whose series map belongs to one decoding goroutine at a time.
	feed  sync.Mutex
	mu    sync.Mutex
	units map[string]*hosted
	moved map[string]time.Time // when each unit last came or went here
	saves uint64
	fails uint64

	early chan struct{} // a unit's held acknowledgements near the bound
}

type hosted struct {
	name string
	in   *stream.Intake
	js   *natsource.JSConsumer

	ackMu  sync.Mutex
	acks   []func() error
	saveMu sync.Mutex // one save of the unit at a time
}

// New returns a host with no unit.
func New(opt Options) *Host {
	if opt.Log == nil {
		opt.Log = slog.New(slog.DiscardHandler)
	}
	if opt.MaxAckPending == 0 {
		opt.MaxAckPending = natsource.DefaultMaxAckPending
	}
	return &Host{opt: opt, log: opt.Log, units: map[string]*hosted{}, moved: map[string]time.Time{},
		early: make(chan struct{}, 1)}
}

// OpenStore binds to the object store of the checkpoints, creating it
// when missing (see cluster.Retry for concurrent starts).
func OpenStore(ctx context.Context, js jetstream.JetStream, bucket string, replicas int) (jetstream.ObjectStore, error) {
	st, err := cluster.Retry(ctx, func(ctx context.Context) (jetstream.ObjectStore, error) {
		st, err := js.ObjectStore(ctx, bucket)
		if errors.Is(err, jetstream.ErrBucketNotFound) {
			st, err = js.CreateObjectStore(ctx, jetstream.ObjectStoreConfig{
				Bucket: bucket, Description: "modewatch unit checkpoints", Replicas: replicas, Storage: jetstream.FileStorage,
			})
		}
		return st, err
	})
	if err != nil {
		return nil, fmt.Errorf("host: object store %s: %w", bucket, err)
	}
	return st, nil
}

// objectName is the object holding unit's checkpoint.
func objectName(unit string) string { return "unit/" + unit + ".json" }

// LoadCheckpoint returns unit's stored checkpoint, or nil when there is
// none; see [LoadCheckpointWithin]. The bound is that of a unit at the
// highest model.max_channels any configuration accepts.
func LoadCheckpoint(ctx context.Context, st jetstream.ObjectStore, unit string) (*pipeline.ModelFile, error) {
	return LoadCheckpointWithin(ctx, st, unit, pipeline.CheckpointBodyBytes(configs.UnitMaxChannelsCeiling))
}

// LoadCheckpointWithin returns unit's stored checkpoint, or nil when there
// is none. An object over limit bytes (by its recorded size, or by what it
// holds) is refused with an error before it is read into memory: a corrupt
// or hostile object cannot make the instance allocate without a bound.
func LoadCheckpointWithin(ctx context.Context, st jetstream.ObjectStore, unit string, limit int64) (*pipeline.ModelFile, error) {
	res, err := st.Get(ctx, objectName(unit))
	if errors.Is(err, jetstream.ErrObjectNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("host: checkpoint of %s: %w", unit, err)
	}
	defer res.Close()
	if info, err := res.Info(); err == nil && info.Size > uint64(limit) {
		return nil, fmt.Errorf("host: checkpoint of %s: object of %d bytes is over the %d bytes of the unit's channel cap", unit, info.Size, limit)
	}
	var b bytes.Buffer
	if _, err := b.ReadFrom(io.LimitReader(res, limit+1)); err != nil {
		return nil, fmt.Errorf("host: checkpoint of %s: %w", unit, err)
	}
	if int64(b.Len()) > limit {
		return nil, fmt.Errorf("host: checkpoint of %s: object is over the %d bytes of the unit's channel cap", unit, limit)
	}
	ck, err := pipeline.DecodeModel(&b)
	if err != nil {
		return nil, fmt.Errorf("host: checkpoint of %s: %w", unit, err)
	}
	if len(ck.Units) != 1 || ck.Units[0].Name != unit {
		return nil, fmt.Errorf("host: checkpoint object of %s holds another unit", unit)
	}
	return ck, nil
}

// Gain restores unit from its stored checkpoint (if any) and starts its
// consumer.
func (h *Host) Gain(ctx context.Context, unit string) error {
	h.op.Lock()
	defer h.op.Unlock()
	return h.gain(ctx, unit)
}

func (h *Host) gain(ctx context.Context, unit string) error {
	h.mu.Lock()
	_, running := h.units[unit]
	h.mu.Unlock()
	if running {
		return nil
	}
	maxCh := configs.DefaultUnitMaxChannels
	if h.opt.MaxChannels != nil {
		maxCh = h.opt.MaxChannels(unit)
	}
	ck, err := LoadCheckpointWithin(ctx, h.opt.Store, unit, pipeline.CheckpointBodyBytes(maxCh))
	if err != nil {
		return err // the lease goes back; another try later
	}
	pl := h.opt.Pipeline
	if ck != nil || !pl.Fresh(unit) {
		_ = pl.RemoveUnit(unit) // a stale copy from an earlier ownership
	}
	var seeds []pipeline.LastReading
	var resume time.Time // time of the frame after the restored checkpoint's last
	if ck != nil {
		restored, errs := pl.Restore([]*pipeline.ModelFile{ck})
		if len(restored) == 1 {
			seeds = ck.Units[0].Last
			if !ck.To.IsZero() {
				resume = ck.To.Add(h.opt.Intake.Align.Period)
			}
			h.log.Info("unit restored from the cluster's checkpoint", "unit", unit, "frames", ck.Frames, "last_frame", ck.To, "saved", ck.Created)
		} else {
			h.log.Warn("stored checkpoint not restored; the unit warms up again", "unit", unit, "err", errors.Join(errs...))
		}
	} else {
		h.log.Info("no stored checkpoint: the unit warms up", "unit", unit)
	}
	u := &hosted{name: unit}
	iopt := h.opt.Intake
	iopt.Log = h.log.With("unit", unit)
	u.in, err = stream.NewIntake(h.opt.Channels, iopt, func(f *stream.Frame) error { return pl.FrameUnit(unit, f) })
	if err != nil {
		_ = pl.RemoveUnit(unit)
		return err
	}
	h.feed.Lock()
	for _, r := range seeds {
		if err := u.in.SeedLast(r.Channel, r.Value, r.Time); err != nil {
			h.log.Warn("carried reading of the checkpoint not restored", "unit", unit, "channel", r.Channel, "err", err)
		}
	}
	if !resume.IsZero() {
		// The unit's own aligner starts right after the checkpoint, so
		// that a frame holding only carried readings is not left out.
		if err := u.in.ResumeAt(resume); err != nil {
			h.log.Warn("aligner not resumed after the checkpoint", "unit", unit, "err", err)
		}
	}
	h.feed.Unlock()
	subj := h.opt.Subject(unit)
	u.js, err = h.opt.Conn.ConsumeJetStream(ctx, natsource.JetStreamConfig{
		Stream: h.opt.Stream, Durable: h.opt.Durable + "_" + unit, FilterSubjects: []string{subj},
		MaxAckPending: h.opt.MaxAckPending, AckWait: h.opt.AckWait,
	}, func(m natsource.Msg) error {
		h.feed.Lock()
		defer h.feed.Unlock()
		return u.in.FeedAck(m.Subject, m.Data, func() error { return h.hold(u, m.Ack) })
	})
	if err != nil {
		_ = pl.RemoveUnit(unit)
		return err
	}
	h.mu.Lock()
	h.units[unit] = u
	h.moved[unit] = time.Now().UTC()
	h.mu.Unlock()
	return nil
}

func (h *Host) hold(u *hosted, ack func() error) error {
	u.ackMu.Lock()
	u.acks = append(u.acks, ack)
	n := len(u.acks)
	u.ackMu.Unlock()
	if n >= h.opt.MaxAckPending/2 {
		select { // save early, before the server stops delivering
		case h.early <- struct{}{}:
		default:
		}
	}
	return nil
}

// Early signals that a unit's held acknowledgements approach the bound:
// save now (SaveAll).
func (h *Host) Early() <-chan struct{} { return h.early }

// save stores u's checkpoint and then acknowledges the messages it covers.
func (h *Host) save(ctx context.Context, u *hosted) error {
	u.saveMu.Lock()
	defer u.saveMu.Unlock()
	h.mu.Lock()
	current := h.units[u.name] == u
	h.mu.Unlock()
	if !current {
		return nil // stopped meanwhile: its acknowledgements are dropped
	}
	u.ackMu.Lock()
	acks := u.acks
	u.acks = nil
	u.ackMu.Unlock()
	ck, err := h.opt.Pipeline.CheckpointUnit(u.name)
	if errors.Is(err, pipeline.ErrNoUnit) {
		// No model yet (no frame): nothing to store; what was read comes
		// again to the next owner.
		u.ackMu.Lock()
		u.acks = append(acks, u.acks...)
		u.ackMu.Unlock()
		return nil
	}
	if err == nil {
		var b []byte
		if b, err = json.Marshal(ck); err == nil {
			_, err = h.opt.Store.PutBytes(ctx, objectName(u.name), b)
		}
	}
	if err != nil {
		u.ackMu.Lock()
		u.acks = append(acks, u.acks...)
		u.ackMu.Unlock()
		h.mu.Lock()
		h.fails++
		h.mu.Unlock()
		return fmt.Errorf("host: store checkpoint of %s: %w", u.name, err)
	}
	for _, ack := range acks {
		if aerr := ack(); aerr != nil {
			h.log.Warn("acknowledgement failed (the message comes again and is skipped)", "unit", u.name, "err", aerr)
		}
	}
	h.mu.Lock()
	h.saves++
	h.mu.Unlock()
	return nil
}

// SaveAll stores every owned unit's checkpoint and acknowledges what each
// covers.
func (h *Host) SaveAll(ctx context.Context) error {
	var errs []error
	for _, u := range h.running() {
		errs = append(errs, h.save(ctx, u))
	}
	return errors.Join(errs...)
}

func (h *Host) running() []*hosted {
	h.mu.Lock()
	defer h.mu.Unlock()
	var out []*hosted
	for _, n := range slices.Sorted(maps.Keys(h.units)) {
		out = append(out, h.units[n])
	}
	return out
}

// Release stops unit's consumer, stores its checkpoint and acknowledges
// what it covers, then forgets the unit: a graceful hand-over. It always
// gives the unit up; if the checkpoint cannot be stored the next owner
// resumes from the previous stored one (and scores again what followed).
func (h *Host) Release(ctx context.Context, unit string) error {
	h.op.Lock()
	defer h.op.Unlock()
	h.mu.Lock()
	u := h.units[unit]
	h.mu.Unlock()
	if u == nil {
		return nil
	}
	if err := u.js.Stop(ctx); err != nil {
		h.log.Warn("consumer stop", "unit", unit, "err", err)
	}
	if err := h.save(ctx, u); err != nil {
		// Nothing is lost: messages are acknowledged only up to the last
		// stored checkpoint, from which the next owner resumes.
		h.log.Warn("checkpoint not stored at hand-over; the next owner resumes from the last stored one", "unit", unit, "err", err)
	}
	h.forget(unit)
	return nil
}

// Lose stops unit at once without saving: another instance may own it.
func (h *Host) Lose(unit string) {
	h.op.Lock()
	defer h.op.Unlock()
	h.drop(unit)
}

func (h *Host) drop(unit string) {
	h.mu.Lock()
	u := h.units[unit]
	h.mu.Unlock()
	if u == nil {
		return
	}
	u.saveMu.Lock() // let a save in progress finish first
	defer u.saveMu.Unlock()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	_ = u.js.Stop(ctx)
	h.forget(unit)
}

func (h *Host) forget(unit string) {
	_ = h.opt.Pipeline.RemoveUnit(unit)
	h.mu.Lock()
	delete(h.units, unit)
	h.moved[unit] = time.Now().UTC()
	h.mu.Unlock()
}

// Resync starts every owned unit again from its stored checkpoint, keeping
// its lease: after the connection to NATS was lost and re-established,
// deliveries in flight may be lost, and the server would send them again
// only after AckWait, too late for the aligner. Starting again from the
// stored checkpoint and the acknowledgement floor scores every frame as an
// uninterrupted run would (frames after the checkpoint are scored again,
// their alert revisions published again with the same ids). A unit that
// cannot start again is logged, left stopped and handed to Options.Forfeit.
func (h *Host) Resync(ctx context.Context) {
	h.op.Lock()
	defer h.op.Unlock()
	for _, u := range h.running() {
		h.drop(u.name)
		if err := h.gain(ctx, u.name); err != nil {
			h.log.Error("unit not started again after a reconnection; its lease is given up", "unit", u.name, "err", err)
			if h.opt.Forfeit != nil {
				h.opt.Forfeit(u.name)
			}
		} else {
			h.log.Info("unit started again from its stored checkpoint after a reconnection", "unit", u.name)
		}
	}
}

// Units returns the units running here, sorted.
func (h *Host) Units() []string {
	h.mu.Lock()
	defer h.mu.Unlock()
	return slices.Sorted(maps.Keys(h.units))
}

// Stats are the host's counters.
type Stats struct {
	Saves, SaveErrors uint64
}

// Stats returns the counters.
func (h *Host) Stats() Stats {
	h.mu.Lock()
	defer h.mu.Unlock()
	return Stats{h.saves, h.fails}
}

// Stop stops every unit's consumer without saving (Release them first for
// a graceful stop). It waits for a Gain, Release or Resync in progress, so
// that none starts a consumer again after it.
func (h *Host) Stop(ctx context.Context) {
	h.op.Lock()
	defer h.op.Unlock()
	for _, u := range h.running() {
		_ = u.js.Stop(ctx)
		h.forget(u.name)
	}
}

// SetForfeit sets Options.Forfeit (the coordinator exists after the host).
func (h *Host) SetForfeit(f func(unit string)) {
	h.mu.Lock()
	h.opt.Forfeit = f
	h.mu.Unlock()
}
