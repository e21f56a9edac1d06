package natsource_test

import (
	"context"
	"fmt"
	"os"
	"sync"
	"time"

	"modewatch/stream"
	"modewatch/stream/natsource"
)

// Run an embedded server, subscribe to a wildcard subject and receive one
// message.
func ExampleConn_SubscribeCore() {
	ctx, conn, stop := exampleServer(10 * time.Second)
	if conn == nil {
		return
	}
	defer stop()
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
// stream.Intake through FeedAck, whose callback runs once the frames a
// message contributed to are emitted; the service holds these
// acknowledgements until its next checkpoint holds those frames, then
// acknowledges them. After a restart the consumer is reset to its
// acknowledgement floor, so everything the checkpoint does not hold comes
// again at once; the frames the checkpoint holds are skipped, and the
// readings its last frame carried are seeded (stream.Intake.SeedLast).
func ExampleConn_ConsumeJetStream() {
	ctx, conn, stop := exampleServer(20 * time.Second)
	if conn == nil {
		return
	}
	defer stop()
	defer conn.Drain(ctx)

	var saved time.Time // the last frame the checkpoint holds; zero on first start
	ch, _ := stream.NewChannels(nil, 0)
	frames := make(chan string, 16)
	in, _ := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: time.Second}},
		func(f *stream.Frame) error {
			if !saved.IsZero() && !f.Start.After(saved) {
				return nil // processed before the checkpoint
			}
			frames <- fmt.Sprint(f.Start.Format("15:04:05"), " ", f.Values)
			return nil
		})
	var mu sync.Mutex
	var held []func() error // acknowledgements waiting for the next checkpoint
	cons, err := conn.ConsumeJetStream(ctx, natsource.JetStreamConfig{
		Stream: "PLANT", Durable: "modewatch", CreateStream: true, StreamSubjects: []string{"plant.readings.>"},
	}, func(m natsource.Msg) error {
		return in.FeedAck(m.Subject, m.Data, func() error {
			mu.Lock()
			held = append(held, m.Ack)
			mu.Unlock()
			return nil
		})
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
	// A checkpoint: save the model state (up to frame 06:00:01), then
	// acknowledge the messages of the frames it holds.
	mu.Lock()
	for _, ack := range held {
		ack()
	}
	fmt.Println("acknowledged with the checkpoint:", len(held))
	mu.Unlock()
	// Output:
	// 06:00:00 [40]
	// 06:00:01 [41]
	// acknowledged with the checkpoint: 2
}

// exampleServer starts an embedded server whose store lies in a new
// temporary folder and connects to it, all under a context that times out
// after d; stop shuts the server down, removes the folder and cancels the
// context. On failure it prints the error and returns a nil conn.
func exampleServer(d time.Duration) (ctx context.Context, conn *natsource.Conn, stop func()) {
	ctx, cancel := context.WithTimeout(context.Background(), d)
	dir, err := os.MkdirTemp("", "natsource-example")
	if err != nil {
		fmt.Println(err)
		cancel()
		return ctx, nil, nil
	}
	srv, err := natsource.StartEmbedded(ctx, natsource.EmbeddedConfig{Port: -1, StoreDir: dir}, nil)
	if err != nil {
		fmt.Println(err)
		os.RemoveAll(dir)
		cancel()
		return ctx, nil, nil
	}
	stop = func() {
		srv.Shutdown()
		os.RemoveAll(dir)
		cancel()
	}
	conn, err = natsource.Connect(ctx, natsource.Options{URLs: []string{srv.ClientURL()}}, nil)
	if err != nil {
		fmt.Println(err)
		stop()
		return ctx, nil, nil
	}
	return ctx, conn, stop
}
