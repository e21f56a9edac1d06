// Package natsource brings reading payloads in from NATS: core subscriptions
// (at-most-once, bounded queue with counted overflow) and JetStream durable
// pull consumers (at-least-once, acknowledged only after the frames a message
// contributed to are processed; duplicates removed by stream sequence on the
// consumer side). It also starts an embedded nats-server for the service when
// no server URL is configured.
//
// The package moves bytes only; decoding, channel mapping and frame alignment
// belong to package stream. Every source delivers a Msg to a Handler:
//
//	type Msg struct { Subject string; Data []byte; Seq uint64; Ack func() error }
//
// Delivery guarantees, in short:
//
//   - Core NATS (SubscribeCore): a message is delivered at most once. When
//     the handler falls behind, the bounded queue (messages and bytes) fills
//     and further messages are dropped and counted (CoreStats.Dropped), never
//     buffered without bound. Ack is a no-op.
//   - JetStream (ConsumeJetStream): a message is delivered at least once. The
//     server stops sending when MaxAckPending messages are unacknowledged, so
//     intake slows when the handler's caller acknowledges late. An AckTracker
//     acknowledges messages once the aligner's watermark passes their latest
//     event time and filters redeliveries by stream sequence, so that, with
//     its Checkpoint saved together with the model state, every message is
//     processed exactly once across crashes and restarts.
//
// Restart procedure for JetStream (checked end to end with stream.Intake in
// the package tests):
//
//  1. Save AckTracker.Checkpoint() together with the model state.
//  2. On start, tr := NewAckTracker(capacity, saved) and ConsumeJetStream
//     with JetStreamConfig{Resume: &saved, Tracker: tr}: the consumer is
//     reset so the server delivers everything after saved.Seq again, in
//     order, and the tracker follows the server's acknowledgement floor.
//  3. Skip frames that start before saved.Watermark; they were processed
//     before the checkpoint.
//
// With these, every frame reaches the model exactly once relative to the
// restored model state. Without a saved checkpoint (Resume nil) the
// consumer restarts after its acknowledgement floor; messages acknowledged
// out of order above the floor then come again (at least once).
//
// Connection handling (Connect) follows nats.go: several server URLs,
// user/password, token, NKey seed file, credentials file, TLS with a CA and a
// client certificate, reconnection with exponential backoff and jitter, and
// state changes reported through a callback and Conn.State.
package natsource
