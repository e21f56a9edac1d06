package stream

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"strconv"
	"sync"
	"time"
	"unsafe"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// DefaultMaxLineBytes bounds one line when reading files and streams.
const DefaultMaxLineBytes = 1 << 20

// DefaultMaxPendingAcks bounds the messages held by FeedAck until their
// frames are emitted.
const DefaultMaxPendingAcks = 1 << 16

// Reason says why a line (or a field of it) was rejected.
type Reason string

// Reasons of LineError.
const (
	ReasonSyntax    Reason = "syntax"     // the decoder rejected the line
	ReasonValue     Reason = "value"      // a field value is not a valid number or boolean
	ReasonTooLong   Reason = "too_long"   // line longer than Options.MaxLineBytes
	ReasonNoTime    Reason = "no_time"    // no timestamp and Options.Now is nil
	ReasonTimeRange Reason = "time_range" // timestamp outside MinTime..MaxTime
	ReasonRefused   Reason = "refused"    // a channel auto-discovery refused; the line is kept
)

// LineError is a problem with one line of input. Column is the 1-based byte
// column (0 if unknown); Line is 1-based within the source (a file, or one
// message payload).
type LineError struct {
	Source string
	Line   int64
	Column int
	Reason Reason
	Err    error
	// Text is the raw line (at most MaxErrorText bytes), for a quarantine
	// sink; empty for lines over MaxLineBytes.
	Text string
}

// MaxErrorText bounds LineError.Text.
const MaxErrorText = 512

func (e *LineError) Error() string {
	if e.Column > 0 {
		return fmt.Sprintf("stream: %s:%d:%d: %v", e.Source, e.Line, e.Column, e.Err)
	}
	return fmt.Sprintf("stream: %s:%d: %v", e.Source, e.Line, e.Err)
}

func (e *LineError) Unwrap() error { return e.Err }

// ErrNoPeriod reports a Feed before the frame period is known.
var ErrNoPeriod = errors.New("stream: frame period not set (configure it or read a file first to infer it)")

// ErrAckBacklog reports that FeedAck could not hold another message; the
// message is left unacknowledged (it will be redelivered).
var ErrAckBacklog = errors.New("stream: too many messages waiting for their frames")

// Options configure an Intake. The zero value of each field means its default.
type Options struct {
	// Align configures frames. With Align.Period == 0 the period is inferred
	// from the first source read by Read or ReadFiles (InferPeriod).
	Align AlignConfig
	// Precision of line-protocol timestamps; default nanoseconds.
	Precision lineprotocol.Precision
	// MaxLineBytes bounds a line read from files and streams; longer lines
	// are skipped and reported. Default DefaultMaxLineBytes.
	MaxLineBytes int
	// Now stamps lines that have no timestamp (receive time). If nil such
	// lines are rejected.
	Now func() time.Time
	// OnError receives every rejected line and refused channel as a
	// *LineError. If nil, the first 100 are logged at Warn level and the
	// rest only counted.
	OnError func(error)
	// OnClockJump is called when a clock jump ends a segment.
	OnClockJump func(from, to time.Time, segment int)
	// MaxPendingAcks bounds FeedAck's held messages; default
	// DefaultMaxPendingAcks.
	MaxPendingAcks int
	// Log receives warnings; default slog.Default().
	Log *slog.Logger
	// Stdin is read for the source name "-"; default os.Stdin.
	Stdin io.Reader
}

// Stats are an Intake's counters. Values are field values (readings).
type Stats struct {
	Lines    uint64 // line-protocol entries seen (comments and blank lines excluded)
	Accepted uint64 // lines accepted (possibly with some fields ignored)

	// Lines rejected, by reason.
	RejectedSyntax    uint64
	RejectedValue     uint64
	RejectedTooLong   uint64
	RejectedNoTime    uint64
	RejectedTimeRange uint64

	Values     uint64 // numeric values delivered to the aligner (valid or marked missing)
	NonFinite  uint64 // NaN or ±Inf (including float overflow): missing
	OutOfRange uint64 // outside the channel's valid range: missing
	Strings    uint64 // string fields, ignored
	Bools      uint64 // boolean fields ignored (channel without BoolAsNumber, or auto-discovery)
	Unmapped   uint64 // numeric fields not in the configured channel map
	Refused    uint64 // values of channels auto-discovery refused
	// RefusedChannels counts distinct refused series fields (up to 4096).
	RefusedChannels uint64

	AlignStats // readings, late, duplicates, frames, clock jumps

	AckPending  int    // messages held by FeedAck
	Acked       uint64 // messages acknowledged
	AckErrors   uint64 // acknowledgements that failed
	AckOverflow uint64 // messages refused by FeedAck (ErrAckBacklog)
}

// Rejected returns the number of rejected lines.
func (s Stats) Rejected() uint64 {
	return s.RejectedSyntax + s.RejectedValue + s.RejectedTooLong + s.RejectedNoTime + s.RejectedTimeRange
}

// Segments returns the number of segments so far (1 + clock jumps).
func (s Stats) Segments() uint64 { return 1 + s.ClockJumps }

// Intake decodes line protocol, maps fields to channels and aligns them into
// frames. Its methods may be called from several goroutines; they serialize.
//
// Per line: the decoder's syntax errors, malformed numbers or booleans and
// bad timestamps reject the whole line (counted by reason, reported as
// *LineError); otherwise each numeric field of a known (or newly discovered)
// channel becomes a reading at the line's event time. Non-finite values and
// values outside the channel's range are readings marked missing. A line
// with no channel value (only strings, unmapped fields) is accepted but does
// not move event time.
type Intake struct {
	mu      sync.Mutex
	ch      *Channels
	opt     Options
	handle  func(*Frame) error
	al      *Aligner
	seeds   map[string]seedReading // SeedLast for channels not discovered yet
	log     *slog.Logger
	st      Stats
	logged  int
	maxLine int

	pubMu sync.Mutex
	pub   Stats

	// Hot-path mirrors of the registry.
	lo, hi []float64
	boolOK []bool

	// Per-line scratch, reused.
	sc   []byte   // measurement, tags and new field keys, unescaped
	key  []byte   // series key
	mEnd int      // measurement is sc[:mEnd]
	tags []tagRef // tags of the line, offsets into sc
	vals []fieldVal
	unk  []span

	// Position of the chunk being decoded.
	src     string
	chunk   []byte
	base    int64 // lines before chunk
	posOff  int
	posLine int64
	posBeg  int
	feedMax int64 // newest accepted event time in the current Feed, ns

	buf  []byte // read buffer for Read
	acks []heldAck
}

type tagRef struct{ k0, k1, v1 int } // key sc[k0:k1], value sc[k1:v1]

// fieldVal is a numeric field of the line being decoded.
type fieldVal struct {
	x float64 // value; NaN if not finite
	c int32   // channel ≥ 0, or -1-i for an unknown field whose key is unk[i]
}

type span struct{ k0, k1 int32 } // sc[k0:k1]

type heldAck struct {
	t   int64
	ack func() error
}

// NewIntake returns an intake over registry ch calling handle for every
// frame. With opt.Align.Period == 0 the aligner is created by the first Read
// or ReadFiles, from the inferred period.
func NewIntake(ch *Channels, opt Options, handle func(*Frame) error) (*Intake, error) {
	if ch == nil {
		return nil, errors.New("stream: nil channel registry")
	}
	if opt.Precision > lineprotocol.Second {
		return nil, fmt.Errorf("stream: unknown timestamp precision %d", opt.Precision)
	}
	if opt.MaxLineBytes <= 0 {
		opt.MaxLineBytes = DefaultMaxLineBytes
	}
	if opt.MaxPendingAcks <= 0 {
		opt.MaxPendingAcks = DefaultMaxPendingAcks
	}
	if opt.Log == nil {
		opt.Log = slog.Default()
	}
	in := &Intake{ch: ch, opt: opt, handle: handle, log: opt.Log, maxLine: opt.MaxLineBytes, feedMax: noTime}
	if opt.Align.Period != 0 {
		if err := in.setPeriod(opt.Align.Period); err != nil {
			return nil, err
		}
	}
	in.syncChannels()
	in.publish()
	return in, nil
}

func (in *Intake) setPeriod(p time.Duration) error {
	cfg := in.opt.Align
	cfg.Period = p
	al, err := NewAligner(cfg, in.ch.Len(), in.handle)
	if err != nil {
		return err
	}
	al.OnClockJump(func(from, to time.Time, seg int) {
		in.log.Info("stream: clock jump ends segment", "source", in.src,
			"from", from, "to", to, "gap", to.Sub(from), "segment", seg)
		if in.opt.OnClockJump != nil {
			in.opt.OnClockJump(from, to, seg)
		}
	})
	in.pubMu.Lock()
	in.al = al
	in.pubMu.Unlock()
	return nil
}

// Period returns the frame period, 0 while it is not yet known.
func (in *Intake) Period() time.Duration {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		return 0
	}
	return in.al.cfg.Period
}

// Channels returns the registry.
func (in *Intake) Channels() *Channels { return in.ch }

// syncChannels extends the hot-path mirrors (and the aligner) to the
// registry's size.
func (in *Intake) syncChannels() {
	n := in.ch.Len()
	for i := len(in.lo); i < n; i++ {
		c := in.ch.Channel(i)
		in.lo = append(in.lo, c.Min)
		in.hi = append(in.hi, c.Max)
		in.boolOK = append(in.boolOK, c.BoolAsNumber)
	}
	if in.al != nil {
		n0 := in.al.Len()
		in.al.Grow(n)
		for i := n0; i < n && len(in.seeds) > 0; i++ {
			name := in.ch.Channel(i).Name
			if r, ok := in.seeds[name]; ok {
				delete(in.seeds, name)
				if err := in.al.Seed(i, r.v, r.t); err != nil {
					in.log.Warn("stream: carried reading not seeded", "channel", name, "err", err)
				}
			}
		}
	}
}

// Feed decodes one payload (one or more lines, as in a message) from source
// (e.g. a subject) into frames. It returns the newest event time the payload
// contributed to a pending frame: the zero Time if it contributed nothing
// (every line late, rejected or without channels). A message source can
// acknowledge the payload once Watermark() is after that time. Malformed
// lines are reported and skipped; the error is non-nil only if the frame
// handler failed or the period is unknown (ErrNoPeriod). Line numbers in
// errors count from 1 within the payload.
func (in *Intake) Feed(source string, payload []byte) (time.Time, error) {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		return time.Time{}, ErrNoPeriod
	}
	in.feedMax = noTime
	err := in.decode(source, 0, payload)
	in.publish()
	if in.feedMax == noTime {
		return time.Time{}, err
	}
	return time.Unix(0, in.feedMax).UTC(), err
}

// FeedAck is Feed for a message that must be acknowledged only after the
// frames it contributed to are emitted (so a crash means redelivery, not
// loss). ack is called, from this or a later FeedAck or Flush, once the
// watermark passes the newest event time the payload contributed; at once if
// it contributed nothing (all lines late or rejected). Ack errors are counted
// and logged. If the frame handler fails, ack is not called.
func (in *Intake) FeedAck(source string, payload []byte, ack func() error) error {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		return ErrNoPeriod
	}
	in.feedMax = noTime
	err := in.decode(source, 0, payload)
	if err == nil {
		switch {
		case in.feedMax == noTime || in.feedMax < in.al.watermark.Load():
			in.callAck(ack)
		case len(in.acks) >= in.opt.MaxPendingAcks:
			in.st.AckOverflow++
			err = ErrAckBacklog
		default:
			in.acks = append(in.acks, heldAck{in.feedMax, ack})
		}
		in.releaseAcks()
	}
	in.publish()
	return err
}

func (in *Intake) callAck(ack func() error) {
	if ack == nil {
		return
	}
	if err := ack(); err != nil {
		in.st.AckErrors++
		in.log.Warn("stream: acknowledge failed", "err", err)
		return
	}
	in.st.Acked++
}

// releaseAcks acknowledges held messages whose newest event time is before
// the watermark.
func (in *Intake) releaseAcks() {
	if len(in.acks) == 0 {
		return
	}
	w := in.al.watermark.Load()
	kept := in.acks[:0]
	for _, h := range in.acks {
		if h.t < w {
			in.callAck(h.ack)
		} else {
			kept = append(kept, h)
		}
	}
	clear(in.acks[len(kept):])
	in.acks = kept
}

// Flush emits every pending frame (end of input) and acknowledges every held
// message.
func (in *Intake) Flush() error {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		return nil
	}
	err := in.al.Flush()
	if err == nil {
		for _, h := range in.acks {
			in.callAck(h.ack)
		}
		clear(in.acks)
		in.acks = in.acks[:0]
	}
	in.publish()
	return err
}

// SeedLast seeds the aligner with channel name's last reading before a
// restart: value v at event time t, carried into the following frames as
// an uninterrupted run would carry it (see Aligner.Seed). Call it before
// the first Feed or Read. A channel not in the registry yet (found by
// auto-discovery) is seeded when it is discovered, before its first
// reading is aligned.
func (in *Intake) SeedLast(name string, v float64, t time.Time) error {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		return ErrNoPeriod
	}
	if t.Before(MinTime) || t.After(MaxTime) {
		return fmt.Errorf("stream: seed %s at %s: %w", name, t.Format(time.RFC3339Nano), ErrTimeRange)
	}
	c, ok := in.ch.Index(name)
	if !ok {
		if in.seeds == nil {
			in.seeds = map[string]seedReading{}
		}
		in.seeds[name] = seedReading{v, t}
		return nil
	}
	if c >= in.al.Len() {
		in.syncChannels()
	}
	return in.al.Seed(c, v, t)
}

// seedReading is a carried reading waiting for its channel's discovery.
type seedReading struct {
	v float64
	t time.Time
}

// Watermark returns the end of the last emitted frame (zero before the
// first). Safe for concurrent use.
func (in *Intake) Watermark() time.Time {
	in.pubMu.Lock()
	al := in.al
	in.pubMu.Unlock()
	if al == nil {
		return time.Time{}
	}
	return al.Watermark()
}

// Stats returns a snapshot of the counters, taken at the end of the last
// Feed, Read chunk or Flush. Safe for concurrent use.
func (in *Intake) Stats() Stats {
	in.pubMu.Lock()
	defer in.pubMu.Unlock()
	return in.pub
}

func (in *Intake) publish() {
	s := in.st
	if in.al != nil {
		s.AlignStats = in.al.stats
	}
	s.AckPending = len(in.acks)
	in.pubMu.Lock()
	in.pub = s
	in.pubMu.Unlock()
}

// report delivers a line error.
func (in *Intake) report(e *LineError) {
	if in.opt.OnError != nil {
		in.opt.OnError(e)
		return
	}
	in.logged++
	if in.logged <= 100 {
		in.log.Warn(e.Error())
		if in.logged == 100 {
			in.log.Warn("stream: further input errors are counted, not logged")
		}
	}
}

// reject counts and reports a rejected line.
func (in *Intake) reject(reason Reason, line int64, col int, err error) {
	switch reason {
	case ReasonSyntax:
		in.st.RejectedSyntax++
	case ReasonValue:
		in.st.RejectedValue++
	case ReasonTooLong:
		in.st.RejectedTooLong++
	case ReasonNoTime:
		in.st.RejectedNoTime++
	case ReasonTimeRange:
		in.st.RejectedTimeRange++
	}
	in.report(&LineError{Source: in.src, Line: line, Column: col, Reason: reason, Err: err, Text: in.lineText(line)})
}

// lineText returns the raw text of line (numbered within the source) if it
// is in the chunk being decoded.
func (in *Intake) lineText(line int64) string {
	rel := line - in.base
	if in.chunk == nil || rel < 1 {
		return ""
	}
	if rel < in.posLine {
		in.posOff, in.posLine, in.posBeg = 0, 1, 0
	}
	for in.posLine < rel {
		i := bytes.IndexByte(in.chunk[in.posOff:], '\n')
		if i < 0 {
			return ""
		}
		in.posOff += i + 1
		in.posLine++
		in.posBeg = in.posOff
	}
	text := in.chunk[in.posBeg:]
	if i := bytes.IndexByte(text, '\n'); i >= 0 {
		text = text[:i]
	}
	text = bytes.TrimSuffix(text, []byte{'\r'})
	if len(text) > MaxErrorText {
		text = text[:MaxErrorText]
	}
	return string(text)
}

// rejectDecode reports an error returned by the decoder.
func (in *Intake) rejectDecode(err error) {
	var de *lineprotocol.DecodeError
	if errors.As(err, &de) {
		in.reject(ReasonSyntax, in.base+de.Line, de.Column, de.Err)
		return
	}
	in.reject(ReasonSyntax, in.base, 0, err)
}

// offsetIn returns the offset of sub within buf, or -1 if sub does not point
// into buf (the decoder returns unescaped copies for some tokens).
func offsetIn(buf, sub []byte) int {
	if len(sub) == 0 || len(buf) == 0 {
		return -1
	}
	b := uintptr(unsafe.Pointer(unsafe.SliceData(buf)))
	s := uintptr(unsafe.Pointer(unsafe.SliceData(sub)))
	if s < b || s >= b+uintptr(len(buf)) {
		return -1
	}
	return int(s - b)
}

// position returns the line (within the source) and 1-based column of byte
// off of the chunk. Calls with increasing off cost O(bytes scanned once).
func (in *Intake) position(off int) (int64, int) {
	if off < 0 {
		return in.base + in.posLine, 0
	}
	if off < in.posOff {
		in.posOff, in.posLine, in.posBeg = 0, 1, 0
	}
	for {
		i := bytes.IndexByte(in.chunk[in.posOff:off], '\n')
		if i < 0 {
			break
		}
		in.posOff += i + 1
		in.posLine++
		in.posBeg = in.posOff
	}
	in.posOff = off
	return in.base + in.posLine, off - in.posBeg + 1
}

// str views b as a string without copying, for parsing only (strconv copies
// the text into the errors it returns).
func str(b []byte) string { return unsafe.String(unsafe.SliceData(b), len(b)) }

// decode runs decode → map → align over chunk, which holds whole lines;
// base is the number of lines of the source before it.
func (in *Intake) decode(src string, base int64, chunk []byte) error {
	in.src, in.chunk, in.base = src, chunk, base
	in.posOff, in.posLine, in.posBeg = 0, 1, 0
	dec := lineprotocol.NewDecoderWithBytes(chunk)
	for dec.Next() {
		if err := in.entry(dec); err != nil {
			in.chunk = nil
			return err
		}
	}
	in.chunk = nil
	return nil
}

// entry handles one line-protocol entry: its series (measurement and
// tags), its fields, its timestamp, the channels it discovers, and the
// values it hands to the aligner. A bad line is rejected (counted, placed,
// quarantined); entry returns an error only if the frame handler failed.
func (in *Intake) entry(dec *lineprotocol.Decoder) error {
	in.st.Lines++
	s, lastTok, ok := in.entrySeries(dec)
	if !ok {
		return nil
	}
	var fc fieldCounts
	if lastTok, fc, ok = in.entryFields(dec, s, lastTok); !ok {
		return nil
	}
	t, ok := in.entryTime(dec, lastTok)
	if !ok {
		return nil
	}
	in.st.Accepted++
	in.st.Strings += fc.strings
	in.st.Bools += fc.bools
	in.st.Unmapped += fc.unmapped
	if len(in.vals) == 0 {
		return nil
	}
	in.discoverFields(s, lastTok)
	return in.putFields(t)
}

// entrySeries decodes the measurement and the tags of an entry into in.sc
// (tags sorted by key) and in.key, and returns the known series of that
// key (nil if new) and the measurement token (to place later errors).
func (in *Intake) entrySeries(dec *lineprotocol.Decoder) (*series, []byte, bool) {
	m, err := dec.Measurement()
	if err != nil {
		in.rejectDecode(err)
		return nil, nil, false
	}
	sc := append(in.sc[:0], m...)
	mEnd := len(sc)
	in.mEnd = mEnd
	tags := in.tags[:0]
	for {
		k, v, err := dec.NextTag()
		if err != nil {
			in.sc, in.tags = sc, tags
			in.rejectDecode(err)
			return nil, nil, false
		}
		if k == nil {
			break
		}
		k0 := len(sc)
		sc = append(sc, k...)
		k1 := len(sc)
		sc = append(sc, v...)
		tags = append(tags, tagRef{k0, k1, len(sc)})
	}
	// Sort tags by key (insertion sort: lines usually arrive sorted).
	for i := 1; i < len(tags); i++ {
		for j := i; j > 0 && bytes.Compare(sc[tags[j].k0:tags[j].k1], sc[tags[j-1].k0:tags[j-1].k1]) < 0; j-- {
			tags[j], tags[j-1] = tags[j-1], tags[j]
		}
	}
	key := append(in.key[:0], sc[:mEnd]...)
	for _, t := range tags {
		key = append(key, 0)
		key = append(key, sc[t.k0:t.k1]...)
		key = append(key, 0)
		key = append(key, sc[t.k1:t.v1]...)
	}
	in.sc, in.key, in.tags = sc, key, tags
	return in.ch.series[string(key)], m, true
}

// fieldCounts are the fields of an entry that give no value.
type fieldCounts struct{ strings, bools, unmapped uint64 }

// entryFields decodes the fields of an entry of series s (nil if new) into
// in.vals: each numeric or boolean field as a value and its channel, or,
// for a field not known yet under auto-discovery, the index of its key in
// in.unk (negative channel). It returns the last token seen and the
// fields that give no value; false if the entry was rejected.
func (in *Intake) entryFields(dec *lineprotocol.Decoder, s *series, lastTok []byte) ([]byte, fieldCounts, bool) {
	var fc fieldCounts
	sc, vals, unk := in.sc, in.vals[:0], in.unk[:0]
	var fk, fv []byte
	var why string // set: the field is rejected for this reason
fields:
	for j := 0; ; j++ {
		var kind lineprotocol.ValueKind
		var err error
		fk, kind, fv, err = dec.NextFieldBytes()
		if err != nil {
			in.sc, in.vals = sc, vals
			in.rejectDecode(err)
			return nil, fc, false
		}
		if fk == nil {
			break
		}
		lastTok = fv
		var x float64
		var isBool bool
		switch kind {
		case lineprotocol.Float:
			x, err = strconv.ParseFloat(str(fv), 64)
			if err != nil && !errors.Is(err, strconv.ErrRange) {
				why = "not a float"
				break fields
			}
			if x-x != 0 { // ±Inf (also from overflow) or NaN
				x = math.NaN()
			}
		case lineprotocol.Int:
			var n int64
			n, err = strconv.ParseInt(str(fv), 10, 64)
			x = float64(n)
			if errors.Is(err, strconv.ErrRange) {
				// A well-formed integer beyond int64 is still a number.
				x, err = parseBig(fv)
			}
			if err != nil {
				why = "not an integer"
				break fields
			}
		case lineprotocol.Uint:
			var n uint64
			n, err = strconv.ParseUint(str(fv), 10, 64)
			x = float64(n)
			if errors.Is(err, strconv.ErrRange) {
				x, err = parseBig(fv)
			}
			if err != nil {
				why = "not an unsigned integer"
				break fields
			}
		case lineprotocol.Bool:
			switch str(fv) {
			case "t", "T", "true", "True", "TRUE":
				x = 1
			case "f", "F", "false", "False", "FALSE":
				x = 0
			default:
				why = "not a boolean"
				break fields
			}
			isBool = true
		default: // String
			fc.strings++
			continue
		}
		c := int32(-1)
		if s != nil {
			if j < len(s.order) && s.orderKeys[j] == string(fk) {
				c = s.order[j] // same field order as the series' last line
			} else {
				c = s.lookup(j, fk, in.ch)
			}
		}
		if c < 0 && (isBool || !in.ch.auto) {
			if isBool {
				fc.bools++
			} else {
				fc.unmapped++
			}
			continue
		}
		if c >= 0 && isBool && !in.boolOK[c] {
			fc.bools++
			continue
		}
		if c < 0 {
			k0 := int32(len(sc))
			sc = append(sc, fk...)
			unk = append(unk, span{k0, int32(len(sc))})
			c = -int32(len(unk))
		}
		vals = append(vals, fieldVal{x, c})
	}
	if why != "" {
		in.sc, in.vals = sc, vals
		in.rejectField(fk, fv, why)
		return nil, fc, false
	}
	in.sc, in.vals, in.unk = sc, vals, unk
	return lastTok, fc, true
}

// entryTime decodes the timestamp of an entry, in ns since the Unix epoch:
// the line's, scaled by the precision, or Options.Now for a line without
// one (rejected when Now is nil); false if the entry was rejected.
func (in *Intake) entryTime(dec *lineprotocol.Decoder, lastTok []byte) (int64, bool) {
	tb, err := dec.TimeBytes()
	if err != nil {
		in.rejectDecode(err)
		return 0, false
	}
	if tb == nil {
		if in.opt.Now == nil {
			line, col := in.position(offsetIn(in.chunk, lastTok))
			in.reject(ReasonNoTime, line, col, errors.New("line has no timestamp"))
			return 0, false
		}
		return in.opt.Now().UnixNano(), true
	}
	ts, err := strconv.ParseInt(str(tb), 10, 64)
	d := int64(in.opt.Precision.Duration())
	if err != nil || ts > maxAbsTime/d || ts < -maxAbsTime/d {
		line, col := in.position(offsetIn(in.chunk, tb))
		in.reject(ReasonTimeRange, line, col, fmt.Errorf("timestamp %q (%s) outside %s..%s",
			tb, in.opt.Precision, MinTime.Format(time.RFC3339), MaxTime.Format(time.RFC3339)))
		return 0, false
	}
	return ts * d, true
}

// discoverFields gives the fields of in.vals not known yet (auto-discovery)
// their channels, or refuses them when the registry is full; s is the
// entry's series (nil if new: created here when a channel is added).
func (in *Intake) discoverFields(s *series, lastTok []byte) {
	vals, unk, sc := in.vals, in.unk, in.sc
	grown := false
	for i := range vals {
		if vals[i].c >= 0 {
			continue
		}
		u := unk[-1-vals[i].c]
		fk := sc[u.k0:u.k1]
		if s == nil {
			// Series without channels (all refused by name) are bounded too.
			if in.ch.Len() >= in.ch.max || len(in.ch.series) >= in.ch.max {
				vals[i].c = in.refuse(fk, lastTok, nil)
				continue
			}
			s = in.newSeries(in.mEnd)
		}
		vals[i].c = in.discover(s, fk, lastTok)
		grown = grown || vals[i].c >= 0
	}
	if grown {
		in.syncChannels()
	}
}

// putFields hands the values of in.vals at event time t (ns) to the
// aligner: NaN where not finite or outside the channel's range, counted;
// all counted late if t is before the aligner's watermark. It returns an
// error only if the frame handler failed.
func (in *Intake) putFields(t int64) error {
	vals := in.vals
	ok, err := in.al.Advance(t)
	if err != nil {
		return err
	}
	if !ok {
		n := 0
		for _, v := range vals {
			if v.c >= 0 {
				n++
			}
		}
		in.al.CountLate(n)
		return nil
	}
	for _, v := range vals {
		c := v.c
		if c < 0 {
			in.st.Refused++
			continue
		}
		x := v.x
		switch {
		case x != x:
			in.st.NonFinite++
		case x < in.lo[c] || x > in.hi[c]:
			in.st.OutOfRange++
			x = math.NaN()
		}
		in.al.Put(int(c), x)
		in.st.Values++
		if t > in.feedMax {
			in.feedMax = t
		}
	}
	return nil
}

// parseBig parses an integer outside the 64-bit range as a float; beyond
// float64 it is NaN (counted as not finite).
func parseBig(digits []byte) (float64, error) {
	x, err := strconv.ParseFloat(str(digits), 64)
	if errors.Is(err, strconv.ErrRange) {
		return math.NaN(), nil
	}
	return x, err
}

// rejectField rejects the line for a malformed value fv of field fk.
func (in *Intake) rejectField(fk, fv []byte, what string) {
	line, col := in.position(offsetIn(in.chunk, fv))
	in.reject(ReasonValue, line, col, fmt.Errorf("field %q: %q is %s", fk, fv, what))
}

// lookup returns the channel of field key fk at position j of a line of s,
// or -1.
func (s *series) lookup(j int, fk []byte, reg *Channels) int32 {
	if j < len(s.order) && s.orderKeys[j] == string(fk) {
		return s.order[j]
	}
	c, ok := s.fields[string(fk)]
	if !ok {
		return -1
	}
	for len(s.order) <= j {
		s.order = append(s.order, -1)
		s.orderKeys = append(s.orderKeys, "")
	}
	s.order[j] = c
	reg.mu.RLock()
	s.orderKeys[j] = reg.list[c].Field
	reg.mu.RUnlock()
	return c
}

// newSeries registers the series of the current line (auto-discovery).
func (in *Intake) newSeries(mEnd int) *series {
	tags := make([]Tag, len(in.tags))
	for i, t := range in.tags {
		tags[i] = Tag{string(in.sc[t.k0:t.k1]), string(in.sc[t.k1:t.v1])}
	}
	s := newSeries(string(in.sc[:mEnd]), tags)
	in.ch.series[string(in.key)] = s
	return s
}

// discover returns the channel for field fk of s, registering it, or -1 if
// refused.
func (in *Intake) discover(s *series, fk, tok []byte) int32 {
	if c, ok := s.fields[string(fk)]; ok { // registered by an earlier field of this line
		return c
	}
	if in.ch.Len() >= in.ch.max {
		return in.refuse(fk, tok, nil)
	}
	c, err := in.ch.discover(s, string(fk))
	if err != nil {
		return in.refuse(fk, tok, err)
	}
	return int32(c)
}

// refuse counts a refused series field of the current line, reporting it
// the first time; it returns -1.
func (in *Intake) refuse(fk, tok []byte, err error) int32 {
	n := len(in.key)
	rk := append(in.key, 0, 0)
	rk = append(rk, fk...)
	in.key = rk[:n]
	if !in.ch.noteRefused(rk) {
		return -1
	}
	in.st.RefusedChannels++
	if err == nil {
		b := append([]byte(nil), in.sc[:in.mEnd]...)
		for _, t := range in.tags {
			b = append(b, '.')
			b = append(b, in.sc[t.k1:t.v1]...)
		}
		b = append(b, '.')
		b = append(b, fk...)
		err = fmt.Errorf("stream: %s: registry is at its cap of %d channels: %w", b, in.ch.max, ErrRefused)
	}
	line, _ := in.position(offsetIn(in.chunk, tok))
	in.report(&LineError{Source: in.src, Line: line, Reason: ReasonRefused, Err: err, Text: in.lineText(line)})
	return -1
}
