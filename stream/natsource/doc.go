// Package natsource brings reading payloads in from NATS: core subscriptions
// (at-most-once, bounded queue with counted overflow) and JetStream durable
// pull consumers (at-least-once, acknowledged by the caller once the frames
// a message contributed to are safely processed). It also starts an embedded nats-server for the service when
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
//     intake slows when the handler's caller acknowledges late. A message
//     not acknowledged within AckWait is delivered again; one lost in flight
//     (a delivery sequence gap, counted in JetStreamStats.DeliveryGaps) comes
//     again after AckWait.
//
// Restart (what the service does; see cmd/modewatch/internal/service):
//
//  1. Each message is fed with stream.Intake.FeedAck; its acknowledgement
//     is released once the frames it contributed to are emitted, and then
//     held until the next checkpoint of the unit models holds those frames.
//  2. On start, ConsumeJetStream resets the durable consumer to its
//     acknowledgement floor (unless NoReset), so the server delivers again,
//     at once and in sequence order, every message after the floor.
//  3. The restored units skip the frames their checkpoint holds, and the
//     aligner is seeded with the readings the checkpoint's last frame
//     carried (stream.Intake.SeedLast).
//
// Messages acknowledged out of order above the floor come again too; the
// skipping in step 3 makes that harmless.
//
// Connection handling (Connect) follows nats.go: several server URLs,
// user/password, token, NKey seed file, credentials file, TLS with a CA and a
// client certificate, reconnection with exponential backoff and jitter, and
// state changes reported through a callback and Conn.State.
package natsource
