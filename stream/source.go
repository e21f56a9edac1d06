package stream

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// InferPrefixBytes is how much of the first source Read looks at to infer the
// frame period when none is configured.
const InferPrefixBytes = 1 << 20

// minChunk is the least read buffer: lines are decoded in chunks of whole
// lines of up to this size (or MaxLineBytes, if larger).
const minChunk = 256 << 10

// ReadFiles reads the named sources in sequence as one stream: "-" is
// standard input; a name ending in ".gz" or content starting with the gzip
// magic bytes is decompressed. It does not flush: call Flush after the last
// source. It stops at the first I/O error (frames already emitted stay
// emitted) or when ctx is done.
func (in *Intake) ReadFiles(ctx context.Context, names ...string) error {
	for _, name := range names {
		if err := in.readFile(ctx, name); err != nil {
			return err
		}
	}
	return nil
}

func (in *Intake) readFile(ctx context.Context, name string) error {
	var r io.Reader
	if name == "-" {
		r = in.opt.Stdin
		if r == nil {
			r = os.Stdin
		}
	} else {
		f, err := os.Open(name)
		if err != nil {
			return fmt.Errorf("stream: %w", err)
		}
		defer f.Close()
		r = f
	}
	br := bufio.NewReaderSize(r, 64<<10)
	magic, _ := br.Peek(2)
	gz := len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b
	if strings.HasSuffix(name, ".gz") && !gz {
		return fmt.Errorf("stream: %s: name ends in .gz but the content is not gzip", name)
	}
	r = br
	if gz {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return fmt.Errorf("stream: %s: %w", name, err)
		}
		defer zr.Close()
		r = zr
	}
	return in.Read(ctx, name, r)
}

// Read streams line protocol from r (named source in errors) through
// decode → map → align with bounded memory: lines are decoded in chunks of
// whole lines; a line longer than Options.MaxLineBytes is skipped and
// reported. If the frame period is not yet known it is inferred from the
// first InferPrefixBytes of r. Read does not flush. ctx is checked between
// reads; a Read blocked in r (a quiet pipe) returns once r does, so close r
// to stop it.
func (in *Intake) Read(ctx context.Context, source string, r io.Reader) error {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.al == nil {
		br := bufio.NewReaderSize(r, InferPrefixBytes)
		prefix, _ := br.Peek(InferPrefixBytes)
		if i := bytes.LastIndexByte(prefix, '\n'); i >= 0 && len(prefix) == InferPrefixBytes {
			prefix = prefix[:i+1]
		}
		p, err := InferPeriod(prefix, in.opt.Precision)
		if err != nil {
			return fmt.Errorf("stream: %s: %w", source, err)
		}
		if err := in.setPeriod(p); err != nil {
			return err
		}
		in.syncChannels()
		in.log.Info("stream: frame period inferred from data", "source", source, "period", p)
		r = br
	}
	size := max(minChunk, in.maxLine+64<<10)
	if cap(in.buf) < size {
		in.buf = make([]byte, size)
	}
	buf := in.buf[:size]
	var (
		n       int   // bytes held in buf
		base    int64 // lines before buf
		skip    bool  // discarding the rest of a too long line
		readErr error
	)
	for readErr == nil {
		if err := ctx.Err(); err != nil {
			in.publish()
			return err
		}
		var m int
		m, readErr = r.Read(buf[n:])
		if m == 0 && readErr == nil {
			continue
		}
		data := buf[:n+m]
		start := 0
		if skip {
			i := bytes.IndexByte(data, '\n')
			if i < 0 {
				n = 0
				continue
			}
			skip = false
			base++
			start = i + 1
		}
		last := bytes.LastIndexByte(data[start:], '\n')
		if last >= 0 {
			var err error
			base, err = in.decodeLines(source, base, data[start:start+last+1])
			if err != nil {
				in.publish()
				return err
			}
			start += last + 1
		}
		n = copy(buf, data[start:])
		if n > in.maxLine {
			in.tooLong(source, base+1)
			n, skip = 0, true
		}
		in.publish()
	}
	if !errors.Is(readErr, io.EOF) {
		in.publish()
		return fmt.Errorf("stream: %s: %w", source, readErr)
	}
	if n > 0 && !skip { // last line without a newline
		if _, err := in.decodeLines(source, base, buf[:n]); err != nil {
			in.publish()
			return err
		}
	}
	in.publish()
	return nil
}

// decodeLines decodes whole (complete lines, the first being line base+1),
// skipping and reporting lines longer than MaxLineBytes. It returns the
// number of lines read so far.
func (in *Intake) decodeLines(source string, base int64, whole []byte) (int64, error) {
	seg, segBase, line := 0, base, base
	for off := 0; off < len(whole); line++ {
		i := bytes.IndexByte(whole[off:], '\n')
		if i < 0 {
			i = len(whole) - off
		}
		if i > in.maxLine {
			if off > seg {
				if err := in.decode(source, segBase, whole[seg:off]); err != nil {
					return line, err
				}
			}
			in.tooLong(source, line+1)
			seg, segBase = off+i+1, line+1
		}
		off += i + 1
	}
	if seg < len(whole) {
		if err := in.decode(source, segBase, whole[seg:]); err != nil {
			return line, err
		}
	}
	return line, nil
}

func (in *Intake) tooLong(source string, line int64) {
	in.st.Lines++
	in.src = source
	in.reject(ReasonTooLong, line, in.maxLine+1, fmt.Errorf("line longer than %d bytes skipped", in.maxLine))
}

// InferPeriod estimates the frame period from a prefix of line protocol:
// for each channel (series field) with at least two distinct timestamps, the
// median spacing of its sorted distinct timestamps; the result is the median
// of those per-channel medians (lower median for even counts). Malformed
// lines are skipped. prec is the timestamp precision.
func InferPeriod(prefix []byte, prec lineprotocol.Precision) (time.Duration, error) {
	if prec > lineprotocol.Second {
		return 0, fmt.Errorf("stream: unknown timestamp precision %d", prec)
	}
	const maxPerChannel = 4096
	times := make(map[string][]int64)
	var fields []string
	var key []byte
	dec := lineprotocol.NewDecoderWithBytes(prefix)
	d := int64(prec.Duration())
lines:
	for dec.Next() {
		m, err := dec.Measurement()
		if err != nil {
			continue
		}
		key = append(key[:0], m...)
		for {
			k, v, err := dec.NextTag()
			if err != nil {
				continue lines
			}
			if k == nil {
				break
			}
			key = append(key, 0)
			key = append(key, k...)
			key = append(key, 0)
			key = append(key, v...)
		}
		fields = fields[:0]
		for {
			k, kind, _, err := dec.NextFieldBytes()
			if err != nil {
				continue lines
			}
			if k == nil {
				break
			}
			if kind == lineprotocol.Float || kind == lineprotocol.Int || kind == lineprotocol.Uint {
				fields = append(fields, string(key)+"\x00\x00"+string(k))
			}
		}
		tb, err := dec.TimeBytes()
		if err != nil || tb == nil {
			continue
		}
		ts, err := strconv.ParseInt(string(tb), 10, 64)
		if err != nil || ts > maxAbsTime/d || ts < -maxAbsTime/d {
			continue
		}
		for _, f := range fields {
			if t := times[f]; len(t) < maxPerChannel {
				times[f] = append(t, ts*d)
			}
		}
	}
	var medians []int64
	for _, t := range times {
		sort.Slice(t, func(i, j int) bool { return t[i] < t[j] })
		var gaps []int64
		for i := 1; i < len(t); i++ {
			if g := t[i] - t[i-1]; g > 0 {
				gaps = append(gaps, g)
			}
		}
		if len(gaps) > 0 {
			medians = append(medians, lowerMedian(gaps))
		}
	}
	if len(medians) == 0 {
		return 0, errors.New("cannot infer the frame period: no channel has two distinct timestamps in the first lines; configure the period")
	}
	return time.Duration(lowerMedian(medians)), nil
}

// lowerMedian returns the ⌈n/2⌉-th smallest of x (sorting x).
func lowerMedian(x []int64) int64 {
	sort.Slice(x, func(i, j int) bool { return x[i] < x[j] })
	return x[(len(x)-1)/2]
}
