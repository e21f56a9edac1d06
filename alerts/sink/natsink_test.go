package sink

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"github.com/santhosh-tekuri/jsonschema/v6"

	"modewatch/alerts"
	"modewatch/stream/natsource/natstest"
)

// startServer runs a real NATS server with JetStream in the test process.
func startServer(t *testing.T) *nats.Conn {
	t.Helper()
	return natstest.Connect(t, natstest.StartJetStream(t))
}

// records runs a small scenario through a real engine and returns every
// record revision it published: a T² incident that escalates and returns,
// acknowledged on the way, and a missing-channel alert.
func records(t *testing.T) []*alerts.Record {
	t.Helper()
	var out []*alerts.Record
	e, err := alerts.NewEngine(alerts.Config{Rules: alerts.Rules{OnCount: 2, OnWindow: 3, OffDelay: 5 * time.Second}},
		alerts.PublisherFunc(func(r *alerts.Record) { out = append(out, r) }), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	ratios := []float64{0.5, 1.5, 1.6, 2.5, 4.5, 3, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 1.2, 1.3, 0.1}
	for i, r := range ratios {
		o := alerts.Observation{
			Unit: "coolwater", Time: t0.Add(time.Duration(i) * time.Second), ModelState: alerts.ModelAdapting,
			Stats:        []alerts.Stat{{Name: alerts.StatT2, Value: 10 * r, Limit: 10}, {Name: alerts.StatSPE, Value: 1, Limit: 4}},
			Contributors: []alerts.Contributor{{Channel: "coolwater.pump2.flow", Share: 0.8, RBC: 8, Limit: 3, Modes: []int{1}}},
		}
		if i < 10 {
			o.Quality = []alerts.Quality{{Channel: "coolwater.pump2.vib", Kind: alerts.QualityStuck}}
		}
		if err := e.Observe(&o); err != nil {
			t.Fatal(err)
		}
		if i == 4 {
			rep := e.Handle(context.Background(), alerts.Command{Op: alerts.OpAck, AlertID: out[0].ID, By: "op1"})
			if !rep.OK {
				t.Fatal(rep.Error)
			}
		}
	}
	if len(out) < 6 {
		t.Fatalf("scenario gave only %d records", len(out))
	}
	return out
}

func messages(t *testing.T, recs []*alerts.Record) []Message {
	t.Helper()
	var ms []Message
	for _, r := range recs {
		m, err := MessageOf(r)
		if err != nil {
			t.Fatal(err)
		}
		ms = append(ms, m)
	}
	return ms
}

// lostAck publishes through the real NATS deliverer and then reports a
// failure on every first attempt, as if the acknowledgement were lost, so
// the sink publishes the same message again.
type lostAck struct {
	*NATS
	mu   sync.Mutex
	seen map[string]bool
	gate chan struct{} // deliveries wait for it to close
}

func (l *lostAck) Deliver(ctx context.Context, m Message) error {
	select {
	case <-l.gate:
	case <-ctx.Done():
		return ctx.Err()
	}
	if err := l.NATS.Deliver(ctx, m); err != nil {
		return err
	}
	l.mu.Lock()
	defer l.mu.Unlock()
	if !l.seen[m.ID] {
		l.seen[m.ID] = true
		return errors.New("acknowledgement lost")
	}
	return nil
}

// streamMsgs reads every message of the stream in order.
func streamMsgs(t *testing.T, js jetstream.JetStream, name string) []*jetstream.RawStreamMsg {
	t.Helper()
	ctx := context.Background()
	st, err := js.Stream(ctx, name)
	if err != nil {
		t.Fatal(err)
	}
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	var out []*jetstream.RawStreamMsg
	for seq := info.State.FirstSeq; seq <= info.State.LastSeq && info.State.Msgs > 0; seq++ {
		m, err := st.GetMsg(ctx, seq)
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, m)
	}
	return out
}

// TestJetStreamDedup: a stream with a 2-minute duplicate window holds one
// message per record revision although the sink published each twice, and
// still one per revision after a restart that replays the whole spool (a
// crash before the delivered position was written). Every stored record
// validates against the schema.
func TestJetStreamDedup(t *testing.T) {
	nc := startServer(t)
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if _, err := js.CreateStream(ctx, jetstream.StreamConfig{
		Name: "ALERTS", Subjects: []string{"mw.alerts.>"}, Duplicates: 2 * time.Minute,
	}); err != nil {
		t.Fatal(err)
	}
	nd, err := NewNATS(nc, NATSOptions{Subject: "mw.alerts.{unit}", JetStream: true})
	if err != nil {
		t.Fatal(err)
	}
	recs := records(t)
	ms := messages(t, recs)

	dir := t.TempDir()
	dest := &lostAck{NATS: nd, seen: map[string]bool{}, gate: make(chan struct{})}
	s, err := New(dest, Options{Name: "nats", SpoolDir: dir, QueueLen: 4, Backoff: fast})
	if err != nil {
		t.Fatal(err)
	}
	set := NewSet(nil, s)
	for _, r := range recs {
		set.Publish(r)
	}
	// Snapshot the spool while nothing is delivered yet, to restart from
	// it below as after a crash that lost the delivered position.
	snapshot, err := os.ReadFile(filepath.Join(dir, "nats.spool"))
	if err != nil {
		t.Fatal(err)
	}
	close(dest.gate)
	waitFor(t, "deliveries", func() bool { return s.Stats().Delivered == uint64(len(ms)) })
	if err := set.Close(ctx); err != nil {
		t.Fatal(err)
	}
	check := func(when string) {
		got := streamMsgs(t, js, "ALERTS")
		if len(got) != len(ms) {
			t.Fatalf("%s: stream holds %d messages, want one per revision: %d", when, len(got), len(ms))
		}
		for i, m := range got {
			if id := m.Header.Get(nats.MsgIdHdr); id != ms[i].ID || !bytes.Equal(m.Data, ms[i].Data) {
				t.Fatalf("%s: message %d: id %q, want %q", when, i, id, ms[i].ID)
			}
			if m.Subject != "mw.alerts.coolwater" {
				t.Errorf("subject %q", m.Subject)
			}
			validate(t, m.Data)
		}
	}
	check("after retried publishes")
	if nd.Duplicates() != uint64(len(ms)) {
		t.Errorf("stream reported %d duplicates, want %d", nd.Duplicates(), len(ms))
	}

	// Crash before the position was written: the whole spool replays.
	dir2 := t.TempDir()
	if len(snapshot) == 0 {
		t.Fatal("empty spool snapshot")
	}
	os.WriteFile(filepath.Join(dir2, "nats.spool"), snapshot, 0o644)
	s2, err := New(nd, Options{Name: "nats", SpoolDir: dir2, Backoff: fast})
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, "replay", func() bool { return s2.Stats().Delivered >= uint64(len(ms)) })
	closeNow(t, s2)
	check("after replaying the spool")
	if s2.Stats().Replayed == 0 {
		t.Errorf("nothing replayed: %+v", s2.Stats())
	}
}

// TestCoreNATS: without JetStream the record arrives on the unit's subject
// with its message id header.
func TestCoreNATS(t *testing.T) {
	nc := startServer(t)
	sub, err := nc.SubscribeSync("mw.alerts.*")
	if err != nil {
		t.Fatal(err)
	}
	nd, err := NewNATS(nc, NATSOptions{Subject: "mw.alerts.{unit}"})
	if err != nil {
		t.Fatal(err)
	}
	s, _ := New(nd, Options{Name: "core", Backoff: fast})
	ms := messages(t, records(t))
	for _, m := range ms {
		s.Submit(m)
	}
	for i := range ms {
		m, err := sub.NextMsg(time.Minute)
		if err != nil {
			t.Fatal(err)
		}
		if m.Header.Get(nats.MsgIdHdr) != ms[i].ID {
			t.Fatalf("message %d: id %q, want %q", i, m.Header.Get(nats.MsgIdHdr), ms[i].ID)
		}
	}
	closeNow(t, s)
	if _, err := NewNATS(nc, NATSOptions{Subject: "mw.*.x"}); err == nil {
		t.Error("wildcard publish subject accepted")
	}
	if got := SubjectToken("boiler 2.a>b"); got != "boiler_2_a_b" {
		t.Errorf("SubjectToken: %q", got)
	}
}

var (
	schemaOnce sync.Once
	schema     *jsonschema.Schema
)

func validate(t *testing.T, data []byte) {
	t.Helper()
	schemaOnce.Do(func() {
		doc, err := jsonschema.UnmarshalJSON(bytes.NewReader(alerts.Schema()))
		if err != nil {
			t.Fatal(err)
		}
		c := jsonschema.NewCompiler()
		c.AssertFormat()
		if err := c.AddResource("record.schema.json", doc); err != nil {
			t.Fatal(err)
		}
		if schema, err = c.Compile("record.schema.json"); err != nil {
			t.Fatal(err)
		}
	})
	inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	if err := schema.Validate(inst); err != nil {
		t.Fatalf("record does not validate: %v\n%s", err, data)
	}
}

// TestLinesFile: the JSON-lines sink writes one valid record per line, in
// order.
func TestLinesFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "alerts.jsonl")
	l, err := OpenLines(path, true)
	if err != nil {
		t.Fatal(err)
	}
	s, _ := New(l, Options{Name: "file", SpoolDir: t.TempDir()})
	recs := records(t)
	set := NewSet(nil, s)
	for _, r := range recs {
		set.Publish(r)
	}
	if err := set.Close(context.Background()); err != nil {
		t.Fatal(err)
	}
	f, _ := os.Open(path)
	defer f.Close()
	dec := json.NewDecoder(f)
	var i int
	for ; ; i++ {
		var raw json.RawMessage
		if err := dec.Decode(&raw); err == io.EOF {
			break
		} else if err != nil {
			t.Fatal(err)
		}
		validate(t, raw)
		var r alerts.Record
		json.Unmarshal(raw, &r)
		if r.ID != recs[i].ID || r.Revision != recs[i].Revision {
			t.Fatalf("line %d: %s#%d, want %s#%d", i+1, r.ID, r.Revision, recs[i].ID, recs[i].Revision)
		}
	}
	if i != len(recs) {
		t.Errorf("%d lines, want %d", i, len(recs))
	}
	if !slices.ContainsFunc(recs, func(r *alerts.Record) bool { return r.Acknowledged != nil }) {
		t.Error("scenario has no acknowledged revision")
	}
}
