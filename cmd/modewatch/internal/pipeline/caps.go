package pipeline

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
	"modewatch/tracker"
)

// UnitModelBytes estimates the memory of a unit's model of p channels in
// bytes: 62·p² + 6000·p (configs.UnitModelBytesSq and UnitModelBytesLin,
// which the configuration's checks use too). The coefficients are fitted
// to the live heap of a tracker after warm-up with the default settings
// (p = 400 and 800: 12.4 and 44.3 MB with the persistence weight,
// model.persist, on by default since its calibration was mended; 9.2 and
// 31.5 MB without it; 5.1 and 15.8 MB before the residual statistic
// joined the defaults), and the test TestUnitModelBytes checks them
// again. The p² term is the covariance, the correlation and the
// candidate a refresh forms beside it (so that a failed refresh keeps the
// model whole), the refresh workspace (18·p²), the residual statistic's
// factor and its inverse (16·p²) and, in a unit of more than 64 channels,
// the persistence weight's copy of that factor with its packed rows
// (20·p² more, measured); a checkpoint of the unit adds about 13·p²
// while it is written. A unit of 64 channels or fewer keeps no copy, so
// the estimate is high for it and for a unit with model.persist off.
func UnitModelBytes(p int) int64 {
	q := int64(p)
	return configs.UnitModelBytesSq*q*q + configs.UnitModelBytesLin*q
}

// maxStateBytes bounds the size of a tracker state of p channels: 16·p²
// bytes plus linear terms. Measured states take 8.2·p² … 11.7·p² bytes
// from p = 100 up without the persistence weight, plus the batch buffer
// and the modes for small p; with the weight (model.persist, on by
// default), a unit of more than 64 channels also keeps the weight's
// copy of the residual factor's lower triangle, 4·p² more: 13.3·p² at
// p = 400 and 12.5·p² at p = 1000, 62 % and 69 % of this bound
// (TestStateBoundPersist); about 12·p² for the widest units by the same
// count (an estimate, not measured). The level steps' window ring adds up
// to levelRingBytes per channel (2·tracker.MaxLevelStepFrames frames, the
// window sums, normalisers and read runs), whatever p.
func maxStateBytes(p int) int {
	return 16*p*p + (2048+levelRingBytes)*p + 64<<10
}

// levelRingBytes is the level steps' checkpoint section per channel at
// its largest window: 2·MaxLevelStepFrames ring values, two sums and a
// normaliser (8 bytes each) and a read run (4).
const levelRingBytes = 8*(2*tracker.MaxLevelStepFrames+3) + 4

// checkState checks one tracker state of p channels: its length against
// the bounds for p, the channel count in its header and its checksum.
func checkState(name string, st []byte, p int) error {
	switch {
	case len(st) > maxStateBytes(p):
		return fmt.Errorf("%w: unit %.64q: tracker state of %d bytes is too long for %d channels (at most %d)", ErrModelFile, name, len(st), p, maxStateBytes(p))
	case len(st) < minStateBytes(p):
		return fmt.Errorf("%w: unit %.64q: tracker state of %d bytes is truncated (%d channels need at least %d)", ErrModelFile, name, len(st), p, minStateBytes(p))
	}
	// The header: magic, version (u16), channel count (u32); the last 4
	// bytes are the CRC-32 of the rest. Checked here so that a damaged
	// state is refused before the tracker allocates for it.
	if sp := int64(binary.LittleEndian.Uint32(st[6:10])); sp != int64(p) {
		return fmt.Errorf("%w: unit %.64q: tracker state for %d channels, the file lists %d", ErrModelFile, name, sp, p)
	}
	if crc32.ChecksumIEEE(st[:len(st)-4]) != binary.LittleEndian.Uint32(st[len(st)-4:]) {
		return fmt.Errorf("%w: unit %.64q: tracker state checksum mismatch (truncated or corrupt)", ErrModelFile, name)
	}
	return nil
}

// memoryBytes estimates the memory of the unit's models: one per
// operating state (at least one), each UnitModelBytes of its channels.
func (u *Unit) memoryBytes() int64 {
	n := 1
	if u.states != nil && len(u.states.models) > 1 {
		n = len(u.states.models)
	}
	return int64(n) * UnitModelBytes(trackerWidth(u.model, len(u.names)))
}

// minStateBytes is the smallest tracker state of p channels: the header
// and checksum (43 bytes), per channel mean, variance, count, Kish sum
// and last value (8 bytes each) and run length (4), and the covariance's
// upper triangle.
func minStateBytes(p int) int {
	return 43 + 44*p + 8*p*(p+1)/2
}

// maxNameBytes bounds a unit or channel name in a model file.
const maxNameBytes = 1024

// CheckpointBodyBytes bounds the JSON of a unit checkpoint whose unit has
// at most maxChannels channels: the base64 of the largest tracker states
// (the unit's and one per operating state, at most tracker.MaxStates),
// the channel names, the carried readings, the data-quality screen's
// runs (screenRunBytes per channel) and the alarm state.
func CheckpointBodyBytes(maxChannels int) int64 {
	return int64(1+tracker.MaxStates)*int64(maxStateBytes(maxChannels))*4/3 + int64(maxChannels)*(3*maxNameBytes+256+screenRunBytes) + 16<<20
}

// screenRunBytes bounds the JSON of one channel's screen run beyond its
// name: alerts.MaxSpikeCount spike ages and two readings of at most 24
// characters each, and the field names and counts.
const screenRunBytes = (alerts.MaxSpikeCount+2)*25 + 256

// checkUnitCaps checks the sizes a model unit asks for against the unit's
// channel cap before anything is built from it: the channel count, the
// names, the carried readings (their channels and their event times, within
// stream.MinTime to stream.MaxTime), the recentring's channel count, and
// the tracker state's own channel count and length. Nothing is allocated.
func checkUnitCaps(mu *ModelUnit, maxChannels int) error {
	p := len(mu.Channels)
	switch {
	case p > maxChannels:
		return fmt.Errorf("%w: unit %.64q has %d channels, over this unit's cap of %d (model.max_channels)", ErrModelFile, mu.Name, p, maxChannels)
	case len(mu.Name) > maxNameBytes:
		return fmt.Errorf("%w: unit name of %d bytes (at most %d)", ErrModelFile, len(mu.Name), maxNameBytes)
	case len(mu.Last) > p:
		return fmt.Errorf("%w: unit %.64q carries %d readings for %d channels", ErrModelFile, mu.Name, len(mu.Last), p)
	case len(mu.Screen) > p:
		return fmt.Errorf("%w: unit %.64q carries %d screen runs for %d channels", ErrModelFile, mu.Name, len(mu.Screen), p)
	case mu.Recentre != nil && len(mu.Recentre.Channels) > p:
		// Distinct channels of the unit (all of them for a new operating
		// point); setRecentre looks each of the unit's up in the list.
		return fmt.Errorf("%w: unit %.64q recentres %d channels of %d", ErrModelFile, mu.Name, len(mu.Recentre.Channels), p)
	case mu.Settings.Lags < 0 || mu.Settings.Lags > tracker.MaxLags:
		return fmt.Errorf("%w: unit %.64q: %d lagged copies (0 to %d)", ErrModelFile, mu.Name, mu.Settings.Lags, tracker.MaxLags)
	case p*(1+mu.Settings.Lags) > maxChannels:
		return fmt.Errorf("%w: unit %.64q: %d channels with %d lagged copies are %d columns, over this unit's cap of %d (model.max_channels)",
			ErrModelFile, mu.Name, p, mu.Settings.Lags, p*(1+mu.Settings.Lags), maxChannels)
	}
	if err := checkState(mu.Name, mu.State, p*(1+mu.Settings.Lags)); err != nil {
		return err
	}
	if err := checkSmoothed(mu); err != nil {
		return err
	}
	if st := mu.States; st != nil {
		if len(st.Models) > tracker.MaxStates || len(st.Bands) > tracker.MaxStates {
			return fmt.Errorf("%w: unit %.64q: %d state models and %d bands (at most %d)", ErrModelFile, mu.Name, len(st.Models), len(st.Bands), tracker.MaxStates)
		}
		for i := range st.Models {
			if err := checkState(fmt.Sprintf("%s state %d", mu.Name, i), st.Models[i].State, p); err != nil {
				return err
			}
		}
	}
	seen := make(map[string]struct{}, p)
	for i, n := range mu.Channels {
		if n == "" || len(n) > maxNameBytes {
			return fmt.Errorf("%w: unit %.64q: channel %d: name of %d bytes (1…%d)", ErrModelFile, mu.Name, i, len(n), maxNameBytes)
		}
		if _, dup := seen[n]; dup {
			return fmt.Errorf("%w: unit %.64q: channel %.64q listed twice", ErrModelFile, mu.Name, n)
		}
		seen[n] = struct{}{}
	}
	for i, r := range mu.Last {
		if _, ok := seen[r.Channel]; !ok {
			return fmt.Errorf("%w: unit %.64q: carried reading %d names channel %.64q, not one of the unit's", ErrModelFile, mu.Name, i, r.Channel)
		}
		// A reading the aligner could not have carried, and one whose
		// nanoseconds would not fit an int64 (the seeds are compared in ns).
		if r.Time.Before(stream.MinTime) || r.Time.After(stream.MaxTime) {
			return fmt.Errorf("%w: unit %.64q: carried reading %d of channel %.64q at %s: %w (%s to %s)", ErrModelFile, mu.Name, i, r.Channel,
				r.Time.Format(time.RFC3339Nano), stream.ErrTimeRange, stream.MinTime.Format(time.DateOnly), stream.MaxTime.Format(time.DateOnly))
		}
	}
	for i, r := range mu.Screen {
		if _, ok := seen[r.Channel]; !ok {
			return fmt.Errorf("%w: unit %.64q: screen run %d names channel %.64q, not one of the unit's", ErrModelFile, mu.Name, i, r.Channel)
		}
	}
	if mu.Settings.WarmUp < 0 || mu.Settings.RefreshEvery < 0 || mu.Settings.MaxModes < 0 ||
		time.Duration(mu.Settings.HalfLife) < 0 {
		return fmt.Errorf("%w: unit %.64q: settings out of range (%+v)", ErrModelFile, mu.Name, mu.Settings)
	}
	return nil
}
