package sink

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"
	"path/filepath"
	"strconv"
)

// The spool is a write-ahead log of one sink, two files in the spool
// directory:
//
//	<name>.spool  append-only; one entry per line:
//	              8 hex digits CRC-32C of the JSON, a space, the JSON
//	              {"id":…,"unit":…,"data":<record>}, a newline
//	<name>.pos    the byte offset up to which entries are delivered,
//	              20 decimal digits and a newline, overwritten in place
//
// Every submitted message is appended before it is queued, so a restart
// replays everything after the delivered offset: delivery is at least once
// and consumers deduplicate by message id. A torn or corrupt tail (a crash
// during an append) is cut off when the spool is opened and counted. When
// everything is delivered, the position is reset to 0 first and the log
// truncated second, so a crash between the two replays (never skips).
type spool struct {
	log, pos *os.File
	path     string
	end      int64 // size of the log
}

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

type spoolEntry struct {
	ID   string          `json:"id"`
	Unit string          `json:"unit"`
	Data json.RawMessage `json:"data"`
}

// openSpool opens (creating) the spool of name in dir and returns it with
// the delivered offset and the number of bytes of torn tail cut off.
func openSpool(dir, name string) (*spool, int64, int64, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, 0, 0, fmt.Errorf("sink: spool: %w", err)
	}
	p := filepath.Join(dir, name+".spool")
	lf, err := os.OpenFile(p, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, 0, 0, fmt.Errorf("sink: spool: %w", err)
	}
	pf, err := os.OpenFile(filepath.Join(dir, name+".pos"), os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		lf.Close()
		return nil, 0, 0, fmt.Errorf("sink: spool: %w", err)
	}
	s := &spool{log: lf, pos: pf, path: p}
	// Scan for the last complete, valid entry.
	good, err := s.scan()
	if err != nil {
		s.close()
		return nil, 0, 0, err
	}
	st, err := lf.Stat()
	if err != nil {
		s.close()
		return nil, 0, 0, fmt.Errorf("sink: spool: %w", err)
	}
	cut := st.Size() - good
	if cut > 0 {
		if err := lf.Truncate(good); err != nil {
			s.close()
			return nil, 0, 0, fmt.Errorf("sink: spool %s: cut torn tail: %w", p, err)
		}
	}
	s.end = good
	off, err := s.readPos()
	if err != nil || off > good || off < 0 {
		off = 0 // unreadable or beyond the log: replay all (duplicates, never loss)
	}
	return s, off, cut, nil
}

// scan returns the offset after the last valid entry of the log.
func (s *spool) scan() (int64, error) {
	var off int64
	for {
		_, next, err := s.read(off)
		if err != nil {
			if errors.Is(err, io.EOF) || errors.Is(err, errCorrupt) {
				return off, nil
			}
			return off, err
		}
		off = next
	}
}

var errCorrupt = errors.New("sink: spool: corrupt entry")

// read returns the entry at off and the offset after it.
func (s *spool) read(off int64) (Message, int64, error) {
	buf := make([]byte, 4096)
	var line []byte
	at := off
	for {
		n, err := s.log.ReadAt(buf, at)
		if i := bytes.IndexByte(buf[:n], '\n'); i >= 0 {
			line = append(line, buf[:i]...)
			break
		}
		line = append(line, buf[:n]...)
		at += int64(n)
		if err != nil {
			if errors.Is(err, io.EOF) {
				if len(line) == 0 {
					return Message{}, off, io.EOF
				}
				return Message{}, off, errCorrupt // torn: no newline
			}
			return Message{}, off, fmt.Errorf("sink: spool %s: %w", s.path, err)
		}
		if len(buf) < 1<<20 {
			buf = make([]byte, 2*len(buf))
		}
	}
	next := off + int64(len(line)) + 1
	if len(line) < 10 || line[8] != ' ' {
		return Message{}, off, errCorrupt
	}
	sum, err := strconv.ParseUint(string(line[:8]), 16, 32)
	if err != nil || uint32(sum) != crc32.Checksum(line[9:], castagnoli) {
		return Message{}, off, errCorrupt
	}
	var e spoolEntry
	if err := json.Unmarshal(line[9:], &e); err != nil {
		return Message{}, off, errCorrupt
	}
	return Message{ID: e.ID, Unit: e.Unit, Data: []byte(e.Data)}, next, nil
}

// encode returns the log line of m.
func encode(m Message) ([]byte, error) {
	if !json.Valid(m.Data) {
		return nil, fmt.Errorf("sink: message %q: data is not JSON", m.ID)
	}
	js, err := json.Marshal(spoolEntry{ID: m.ID, Unit: m.Unit, Data: m.Data})
	if err != nil {
		return nil, fmt.Errorf("sink: message %q: %w", m.ID, err)
	}
	line := make([]byte, 0, len(js)+10)
	line = fmt.Appendf(line, "%08x ", crc32.Checksum(js, castagnoli))
	line = append(line, js...)
	return append(line, '\n'), nil
}

// append writes one encoded line at the end; it returns the entry's
// offsets.
func (s *spool) append(line []byte) (off, end int64, err error) {
	off = s.end
	if _, err := s.log.WriteAt(line, off); err != nil {
		// Cut a partial write so the log stays well formed.
		_ = s.log.Truncate(off)
		return 0, 0, fmt.Errorf("sink: spool %s: %w", s.path, err)
	}
	s.end = off + int64(len(line))
	return off, s.end, nil
}

func (s *spool) writePos(off int64) error {
	b := fmt.Appendf(nil, "%020d\n", off)
	if _, err := s.pos.WriteAt(b, 0); err != nil {
		return fmt.Errorf("sink: spool position: %w", err)
	}
	return nil
}

func (s *spool) readPos() (int64, error) {
	b := make([]byte, 21)
	n, err := s.pos.ReadAt(b, 0)
	if n == 0 && errors.Is(err, io.EOF) {
		return 0, nil
	}
	if n != 21 || b[20] != '\n' {
		return 0, errCorrupt
	}
	return strconv.ParseInt(string(b[:20]), 10, 64)
}

// reset empties a fully delivered log: position first, then the log.
func (s *spool) reset() error {
	if err := s.writePos(0); err != nil {
		return err
	}
	if err := s.log.Truncate(0); err != nil {
		return fmt.Errorf("sink: spool %s: %w", s.path, err)
	}
	s.end = 0
	return nil
}

func (s *spool) sync() error {
	return errors.Join(s.log.Sync(), s.pos.Sync())
}

func (s *spool) close() error {
	return errors.Join(s.log.Close(), s.pos.Close())
}

// rejectFile keeps messages a destination refused permanently, as JSON
// lines {"id","unit","error","data"} in <name>.rejected, for an operator
// to inspect and resend.
type rejectFile struct{ f *os.File }

func openReject(dir, name string) (*rejectFile, error) {
	f, err := os.OpenFile(filepath.Join(dir, name+".rejected"), os.O_WRONLY|os.O_APPEND|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("sink: reject file: %w", err)
	}
	return &rejectFile{f}, nil
}

func (r *rejectFile) write(m Message, cause error) error {
	var data json.RawMessage = m.Data
	if !json.Valid(data) {
		data = nil
	}
	b, err := json.Marshal(struct {
		ID    string          `json:"id"`
		Unit  string          `json:"unit"`
		Error string          `json:"error"`
		Data  json.RawMessage `json:"data"`
	}{m.ID, m.Unit, cause.Error(), data})
	if err != nil {
		return err
	}
	_, err = r.f.Write(append(b, '\n'))
	return err
}

func (r *rejectFile) close() error {
	if r == nil {
		return nil
	}
	return r.f.Close()
}
