package stream_test

import (
	"fmt"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"

	"modewatch/stream"
)

// Two assets report every second; pump2's flow misses one report. Frames are
// one second long, emitted once event time passes a frame's end plus one
// period of allowed lateness; Flush emits the rest at end of input.
func ExampleIntake_Feed() {
	ch, _ := stream.NewChannels(nil, 0) // auto-discovery
	in, _ := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: time.Second, Staleness: time.Second}},
		func(f *stream.Frame) error {
			fmt.Println(f.Start.Format("15:04:05"), f.Values, f.Missing)
			return nil
		})
	in.Feed("example", []byte(`coolwater,asset=pump2 flow=41.5,temp=18.25 1700000000000000000
coolwater,asset=pump3 flow=39i 1700000000000000000
coolwater,asset=pump2 temp=18.5 1700000001000000000
coolwater,asset=pump3 flow=40i 1700000001000000000
coolwater,asset=pump2 flow=42,temp=18.75 1700000002000000000
coolwater,asset=pump3 flow=41i 1700000002000000000
`))
	in.Flush()
	fmt.Println(ch.Names(nil))
	// Output:
	// 22:13:20 [41.5 18.25 39] [false false false]
	// 22:13:21 [NaN 18.5 40] [true false false]
	// 22:13:22 [42 18.75 41] [false false false]
	// [coolwater.pump2.flow coolwater.pump2.temp coolwater.pump3.flow]
}

// A configured channel map: the flow channel has a valid range and a display
// name; the running flag is a boolean read as 0/1 and kept out of the model.
// Fields not in the map are counted as unmapped.
func ExampleNewChannels() {
	lo, hi := 0.0, 120.0
	noModel := false
	ch, err := stream.NewChannels([]stream.ChannelSpec{
		{Measurement: "coolwater", Tags: map[string]string{"asset": "pump2"}, Field: "flow",
			Display: "Pump 2 flow", EngUnit: "L/min", Min: &lo, Max: &hi},
		{Measurement: "coolwater", Tags: map[string]string{"asset": "pump2"}, Field: "running",
			BoolAsNumber: true, Model: &noModel},
	}, 0)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, c := range ch.List() {
		fmt.Printf("%s %q unit=%s model=%v range=[%g, %g]\n", c.Name, c.Display, c.Unit, c.Model, c.Min, c.Max)
	}
	// Output:
	// coolwater.pump2.flow "Pump 2 flow" unit=coolwater model=true range=[0, 120]
	// coolwater.pump2.running "coolwater.pump2.running" unit=coolwater model=false range=[-Inf, +Inf]
}

// The aligner on its own: readings at event times (seconds) with lateness
// none; the reading at 0.4 s arrives after frame 0 was emitted and is late.
func ExampleAligner() {
	a, _ := stream.NewAligner(stream.AlignConfig{Period: time.Second, Lateness: -1}, 1, func(f *stream.Frame) error {
		fmt.Println(f.Start.Unix()-1700000000, f.Values)
		return nil
	})
	t0 := time.Unix(1700000000, 0)
	for _, r := range []struct {
		sec float64
		v   float64
	}{{0.1, 1}, {1.2, 2}, {0.4, 9}, {2.3, 3}} {
		a.Add(0, t0.Add(time.Duration(r.sec*float64(time.Second))), r.v)
	}
	a.Flush()
	fmt.Printf("late %d, watermark +%v\n", a.Stats().Late, a.Watermark().Sub(t0))
	// Output:
	// 0 [1]
	// 1 [2]
	// 2 [3]
	// late 1, watermark +2.5s
}

// InferPeriod estimates the frame period from the first lines of a
// recording when none is configured.
func ExampleInferPeriod() {
	p, err := stream.InferPeriod([]byte(`boiler drum=1 1700000000
boiler drum=2 1700000005
boiler drum=3 1700000010
boiler drum=4 1700000020
`), lineprotocol.Second)
	fmt.Println(p, err)
	// Output: 5s <nil>
}

// A restart seeds the aligner with the reading the last checkpointed frame
// carried (a flow of 12.5 read at 10:00:00.4), so the frame at
// 10:00:01, which has no flow reading of its own, carries it as an
// uninterrupted run would (staleness 3 s, the default).
func ExampleAligner_Seed() {
	t0 := time.Date(2026, 1, 5, 10, 0, 0, 0, time.UTC)
	a, _ := stream.NewAligner(stream.AlignConfig{Period: time.Second}, 2, func(f *stream.Frame) error {
		fmt.Println(f.Start.Format("15:04:05"), f.Values, f.Missing)
		return nil
	})
	if err := a.Seed(1, 12.5, t0.Add(400*time.Millisecond)); err != nil {
		fmt.Println(err)
	}
	a.Add(0, t0.Add(1100*time.Millisecond), 80.1)
	a.Flush()
	// Output:
	// 10:00:01 [80.1 12.5] [false false]
}

// A restarted aligner resumes right after its checkpoint's last frame
// (10:00:01): the frame at 10:00:02, which holds only the carried reading
// of channel 0, is emitted before that of the first new reading.
func ExampleAligner_ResumeAt() {
	t0 := time.Date(2026, 1, 5, 10, 0, 0, 0, time.UTC)
	a, _ := stream.NewAligner(stream.AlignConfig{Period: time.Second, Staleness: 3 * time.Second}, 1, func(f *stream.Frame) error {
		fmt.Println(f.Start.Format("15:04:05"), f.Values, f.Missing)
		return nil
	})
	a.Seed(0, 80.1, t0.Add(1400*time.Millisecond))
	if err := a.ResumeAt(t0.Add(2 * time.Second)); err != nil {
		fmt.Println(err)
	}
	a.Add(0, t0.Add(3100*time.Millisecond), 80.4)
	a.Flush()
	// Output:
	// 10:00:02 [80.1] [false]
	// 10:00:03 [80.4] [false]
}
