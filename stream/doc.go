// Package stream turns plant readings into aligned frames for the tracker.
//
// Readings arrive as line protocol (the text format of
// github.com/influxdata/line-protocol/v2, decoded with its official decoder):
//
//	coolwater,asset=pump2 flow=41.7,temp=18.2 1556813561098000000
//
// Each numeric field of a series (measurement + tag set) is one channel. A
// Channels registry maps series fields to channel indices, either from a
// configured channel map or by auto-discovery, where the channel name is
//
//	<measurement>.<tag values in tag-key order, joined by '.'>.<field>
//
// (coolwater.pump2.flow above). An Aligner collects readings by event time
// (the line's timestamp) into fixed frame periods and hands one Frame per
// period to a handler once event time has passed the frame's end plus the
// allowed lateness. An Intake ties decode, map and align together for files,
// stdin and message payloads, counts every reading it accepts or rejects
// (Stats), and reports malformed input as *LineError naming source, line and
// column.
//
// Data flows one way: bytes → readings → frames. Nothing here does
// statistics; the tracker consumes the frames.
package stream
