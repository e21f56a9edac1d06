package natsource_test

import (
	"context"
	"errors"
	"fmt"
	"os"
	"time"

	"modewatch/stream"
	"modewatch/stream/natsource"
)

// Acknowledge JetStream messages once the aligner's watermark has passed
// their latest event time, and drop a redelivery.
func ExampleAckTracker() {
	t0 := time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)
	ack := func(seq uint64) func() error {
		return func() error { fmt.Println("ack", seq); return nil }
	}
	tr := natsource.NewAckTracker(0, natsource.Checkpoint{})
	latest := []time.Duration{1: 10 * time.Second, 2: 20 * time.Second} // by stream seq
	for seq := uint64(1); seq <= 2; seq++ {
		m := natsource.Msg{Seq: seq, Ack: ack(seq)}
		if tr.Admit(m) {
			// ... feed m.Data to decode → map → align ...
			_ = tr.Add(m, t0.Add(latest[seq]))
		}
	}
	tr.AckThrough(t0.Add(15 * time.Second)) // frames up to 12:00:15 processed
	// Seq 1 comes again (its acknowledgement was lost): acknowledged, not fed.
	fmt.Println("redelivered 1 admitted:", tr.Admit(natsource.Msg{Seq: 1, Ack: ack(1)}))
	tr.AckThrough(t0.Add(25 * time.Second))
	fmt.Println("last processed seq:", tr.Checkpoint().Seq)
	// Output:
	// ack 1
	// ack 1
	// redelivered 1 admitted: false
	// ack 2
	// last processed seq: 2
}

// Run an embedded server, subscribe to a wildcard subject and receive one
// message.
func ExampleConn_SubscribeCore() {
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	dir, err := os.MkdirTemp("", "natsource-example")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer os.RemoveAll(dir)
	srv, err := natsource.StartEmbedded(ctx, natsource.EmbeddedConfig{Port: -1, StoreDir: dir}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	defer srv.Shutdown()

	conn, err := natsource.Connect(ctx, natsource.Options{URLs: []string{srv.ClientURL()}}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	got := make(chan string, 1)
	sub, err := conn.SubscribeCore(ctx, natsource.CoreConfig{Subjects: []string{"plant.readings.*"}},
		func(m natsource.Msg) error {
			got <- m.Subject + ": " + string(m.Data)
			return nil
		})
	if err != nil {
		fmt.Println(err)
		return
	}
	conn.NATS().Publish("plant.readings.coolwater", []byte("coolwater,asset=pump2 flow=12.5 1772366400000000000"))
	fmt.Println(<-got)
	sub.Stop(ctx)
	conn.Drain(ctx)
	fmt.Println(conn.State())
	// Output:
	// plant.readings.coolwater: coolwater,asset=pump2 flow=12.5 1772366400000000000
	// closed
}

// The JetStream wiring of the service: a durable consumer feeds
// stream.Intake, an AckTracker acknowledges by the intake's watermark, and
// the checkpoint (saved with the model state) resumes it after a restart.
func ExampleConn_ConsumeJetStream() {
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	dir, err := os.MkdirTemp("", "natsource-example")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer os.RemoveAll(dir)
	srv, err := natsource.StartEmbedded(ctx, natsource.EmbeddedConfig{Port: -1, StoreDir: dir}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	defer srv.Shutdown()
	conn, err := natsource.Connect(ctx, natsource.Options{URLs: []string{srv.ClientURL()}}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	defer conn.Drain(ctx)

	var saved *natsource.Checkpoint // loaded with the model state; nil on first start
	var cp natsource.Checkpoint
	if saved != nil {
		cp = *saved
	}
	ch, _ := stream.NewChannels(nil, 0)
	frames := make(chan string, 16)
	in, _ := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: time.Second}},
		func(f *stream.Frame) error {
			if f.Start.Before(cp.Watermark) {
				return nil // processed before the checkpoint
			}
			frames <- fmt.Sprint(f.Start.Format("15:04:05"), " ", f.Values)
			return nil
		})
	tr := natsource.NewAckTracker(0, cp)
	cons, err := conn.ConsumeJetStream(ctx, natsource.JetStreamConfig{
		Stream: "PLANT", Durable: "modewatch", CreateStream: true, StreamSubjects: []string{"plant.readings.>"},
		Resume: saved, Tracker: tr,
	}, func(m natsource.Msg) error {
		if !tr.Admit(m) {
			return nil
		}
		latest, err := in.Feed(m.Subject, m.Data)
		if addErr := tr.Add(m, latest); addErr != nil {
			return addErr
		}
		_, ackErr := tr.AckThrough(in.Watermark())
		return errors.Join(err, ackErr)
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	for s := 0; s < 4; s++ {
		line := fmt.Sprintf("coolwater,asset=pump2 flow=%d %d", 40+s, time.Date(2026, 3, 1, 6, 0, s, 0, time.UTC).UnixNano())
		conn.NATS().Publish("plant.readings.coolwater", []byte(line))
	}
	// Frames are emitted once event time passes their end plus one period.
	fmt.Println(<-frames)
	fmt.Println(<-frames)
	cons.Stop(ctx)
	fmt.Println("checkpoint seq ≤ 2:", tr.Checkpoint().Seq <= 2, "watermark:", tr.Checkpoint().Watermark.Format("15:04:05"))
	// Output:
	// 06:00:00 [40]
	// 06:00:01 [41]
	// checkpoint seq ≤ 2: true watermark: 06:00:02
}
