package stream_test

import (
	"fmt"
	"time"

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
