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
// Connection handling (Connect) follows nats.go: several server URLs,
// user/password, token, NKey seed file, credentials file, TLS with a CA and a
// client certificate, reconnection with exponential backoff and jitter, and
// state changes reported through a callback and Conn.State.
package natsource
