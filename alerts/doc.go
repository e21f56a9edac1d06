// Package alerts turns the per-frame scores of each plant unit into alarm
// states and alert records, applies alarm-rate hygiene (floods, chattering,
// stale alarms), accepts operator commands (acknowledge, shelve, maintenance)
// and hands the records to sinks (package alerts/sink).
//
// Alarm states follow the semantics of alarm management practice
// (ANSI/ISA-18.2-2016, IEC 62682:2014, EEMUA 191) and of OPC UA Part 9,
// Annex B.1.5 for on-delay, off-delay and deadband:
//
//	normal → confirming → active → clearing → normal
//
// An alarm of a statistic goes confirming when the statistic first exceeds
// its control limit (over the limit, waiting for the on-delay count), active
// when it is over the limit in at least N of the last M frames (and, if
// OnHold > 0, has been confirming for OnHold), clearing when it falls below
// limit·(1 − Deadband) (waiting out the off-delay), and normal once it has
// stayed there for OffDelay. Time is always the frame (event) time of the Observation,
// never the wall clock, so replays run faster than real time and give the
// same records.
//
// One alert record is kept per incident and republished with a new revision
// each time it changes; the pair (id, revision) is the deduplication key.
// Every record carries the caution
//
//	Advisory only: verify in the field and follow site procedures.
//
// modewatch is advisory: it never acts on the plant.
package alerts
