package stream

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// errAt is an expected error position and reason.
type errAt struct {
	line   int64
	column int
	reason Reason
}

func checkErrs(t *testing.T, got []*LineError, want []errAt, source string) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("got %d errors %v, want %d", len(got), got, len(want))
	}
	for i, w := range want {
		g := got[i]
		if g.Source != source || g.Line != w.line || g.Column != w.column || g.Reason != w.reason {
			t.Errorf("error %d: %s:%d:%d %s (%v), want %s:%d:%d %s", i, g.Source, g.Line, g.Column, g.Reason, g.Err, source, w.line, w.column, w.reason)
		}
	}
}

// TestBadLines: malformed lines are rejected with source, line and column,
// counted by reason, and the lines around them are kept. Columns are 1-based
// byte columns pointing at the offending token (the decoder's own positions
// for syntax errors; the value's first byte for values).
func TestBadLines(t *testing.T) {
	payload := strings.Join([]string{
		"m,asset=a x=1 1700000000000000000",       // 1 good
		"this is not line protocol",               // 2 field "is" without '=' (col 8: after "this is")
		"m,asset=a x=2 1700000001000000000",       // 3 good
		"m,asset=a x=",                            // 4 truncated: no value (col 13)
		"m,asset=a x=1.2.3 1700000001000000000",   // 5 not a float (col 13)
		"m,asset=a x=12abci 1700000001000000000",  // 6 not an integer (col 13)
		"m,asset=a x=tru 1700000001000000000",     // 7 not a boolean (col 13)
		"m,asset=a x=1 99999999999999999999",      // 8 timestamp beyond int64 (col 15)
		"m,asset=a x=1 9223372036854775807",       // 9 beyond MaxTime (col 15)
		"m,asset=a x=4",                           // 10 no timestamp (col 13: the last value)
		"m,asset=a\x00 x=1 1700000001000000000",   // 11 NUL in the tag value
		"m,asset=a x=NaN 1700000001000000000",     // 12 NaN has no line-protocol syntax: decoder error
		"\x00\x01\x02garbage",                     // 13 control bytes
		"m,asset=a x=3,y=5 1700000002000000000",   // 14 good
		"m,asset=a x=3 1700000002000000000 extra", // 15 text after the timestamp
		"m,asset=a x=4,y",                         // 16 truncated in the field set, no newline
	}, "\n")
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	if _, err := in.Feed("subj.a", []byte(payload)); err != nil {
		t.Fatal(err)
	}
	in.Flush()
	checkErrs(t, s.errs, []errAt{
		{2, 8, ReasonSyntax}, {4, 13, ReasonSyntax}, {5, 13, ReasonValue}, {6, 13, ReasonValue},
		{7, 13, ReasonValue}, {8, 15, ReasonTimeRange}, {9, 15, ReasonTimeRange}, {10, 13, ReasonNoTime},
		{11, 10, ReasonSyntax}, {12, 13, ReasonSyntax}, {13, 1, ReasonSyntax}, {15, 35, ReasonSyntax},
		{16, 16, ReasonSyntax},
	}, "subj.a")
	st := in.Stats()
	if st.Lines != 16 || st.Accepted != 3 || st.RejectedSyntax != 7 || st.RejectedValue != 3 ||
		st.RejectedTimeRange != 2 || st.RejectedNoTime != 1 {
		t.Errorf("stats %+v", st)
	}
	// The good lines 1, 3 and 14 make three frames: x = 1, 2, 3 and y = 5.
	x, _ := in.Channels().Index("m.a.x")
	if len(s.frames) != 3 || s.frames[0].Values[x] != 1 || s.frames[1].Values[x] != 2 || s.frames[2].Values[x] != 3 {
		t.Errorf("frames %+v", s.frames)
	}
	if !strings.HasPrefix(s.errs[0].Error(), "stream: subj.a:2:8: ") {
		t.Errorf("error text %q", s.errs[0].Error())
	}
	// Each error carries its raw line for a quarantine sink.
	for _, e := range s.errs {
		if want := strings.Split(payload, "\n")[e.Line-1]; e.Text != want {
			t.Errorf("line %d text %q, want %q", e.Line, e.Text, want)
		}
	}
}

// TestNonFinite: ±Inf and float overflow are readings marked missing and
// counted; the other fields of the line are kept.
func TestNonFinite(t *testing.T) {
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	// "inf" or "NaN" without a sign start with a letter, which the decoder
	// does not accept as a number: the whole line is a syntax error (column 33
	// is the "inf" token).
	in.Feed("f", []byte("m a=-Inf,b=1,c=1e400,d=-1e999,e=inf 1700000000000000000\n"))
	checkErrs(t, s.errs, []errAt{{1, 33, ReasonSyntax}}, "f")
	if st := in.Stats(); st.Accepted != 0 || st.NonFinite != 0 {
		t.Errorf("stats %+v", st)
	}
	in, s = newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	in.Feed("f", []byte("m a=-Inf,b=1,c=1e400,d=-1e999 1700000000000000000\n"))
	in.Flush()
	st := in.Stats()
	if st.NonFinite != 3 || st.Values != 4 || len(s.errs) != 0 || len(s.frames) != 1 {
		t.Fatalf("stats %+v errors %v", st, s.errs)
	}
	f := s.frames[0]
	for i, want := range []float64{nan, 1, nan, nan} {
		if !sameFloat(f.Values[i], want) || f.Missing[i] != math.IsNaN(want) {
			t.Errorf("channel %d: %v, want %v", i, f.Values[i], want)
		}
	}
}

// TestChannelMap: configured channels with valid range, bool mapping and
// model flag; unmapped fields counted; extra tags make another series.
func TestChannelMap(t *testing.T) {
	specs := []ChannelSpec{
		{Name: "P2 flow", Measurement: "coolwater", Tags: map[string]string{"asset": "pump2"}, Field: "flow",
			EngUnit: "L/min", Min: ptr(0.0), Max: ptr(100.0), Unit: "cooling"},
		{Measurement: "coolwater", Tags: map[string]string{"asset": "pump2"}, Field: "running", BoolAsNumber: true, Model: ptr(false)},
	}
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}}, specs...)
	in.Feed("f", []byte(`coolwater,asset=pump2 flow=50,running=t,temp=20 1700000000000000000
coolwater,asset=pump2 flow=150,running=false 1700000001000000000
coolwater,asset=pump2,host=gw1 flow=60 1700000002000000000
`))
	in.Flush()
	st := in.Stats()
	if st.OutOfRange != 1 || st.Unmapped != 2 || st.Values != 4 || in.Channels().Len() != 2 {
		t.Errorf("stats %+v, channels %v", st, in.Channels().Names(nil))
	}
	c0, c1 := in.Channels().Channel(0), in.Channels().Channel(1)
	if c0.Name != "P2 flow" || c0.Display != "P2 flow" || c0.Unit != "cooling" || !c0.Model || c0.EngUnit != "L/min" {
		t.Errorf("channel 0 %+v", c0)
	}
	if c1.Name != "coolwater.pump2.running" || c1.Unit != "coolwater" || c1.Model || !math.IsInf(c1.Min, -1) {
		t.Errorf("channel 1 %+v", c1)
	}
	// The third line's series (extra tag host) is not in the map: all its
	// fields are unmapped and it makes no frame.
	want := [][]float64{{50, 1}, {nan, 0}}
	if len(s.frames) != len(want) {
		t.Fatalf("frames %+v", s.frames)
	}
	for i, w := range want {
		for c, v := range w {
			if !sameFloat(s.frames[i].Values[c], v) {
				t.Errorf("frame %d channel %d: %v, want %v", i, c, s.frames[i].Values[c], v)
			}
		}
	}
	// Every problem of a map is reported at once, naming the entry.
	_, err := NewChannels([]ChannelSpec{{Field: "x"}, {Measurement: "m"}, {Measurement: "m", Field: "x", Min: ptr(2.0), Max: ptr(1.0)},
		{Name: "a", Measurement: "m", Field: "y"}, {Name: "a", Measurement: "m", Field: "z"}, {Measurement: "m", Field: "y"}}, 0)
	for _, frag := range []string{"channel 1: measurement is empty", "channel 2: field is empty", "channel 3: min 2 is above max 1",
		`channel 5 (a): name "a" is used twice`, "channel 6: same series and field as a"} {
		if err == nil || !strings.Contains(err.Error(), frag) {
			t.Errorf("error %v lacks %q", err, frag)
		}
	}
}

// TestRefused: over the auto-discovery cap new channels are refused, reported
// once per series field and counted per value.
func TestRefused(t *testing.T) {
	in, s := newTestIntakeCap(t, Options{Align: AlignConfig{Period: time.Second}}, 2)
	in.Feed("f", []byte("m a=1,b=2,c=3 1700000000000000000\nm a=1,b=2,c=3 1700000001000000000\nn x=1 1700000001000000000\n"))
	st := in.Stats()
	if in.Channels().Len() != 2 || st.Refused != 3 || st.RefusedChannels != 2 || len(s.errs) != 2 {
		t.Fatalf("channels %d stats %+v errors %v", in.Channels().Len(), st, s.errs)
	}
	if !errors.Is(s.errs[0], ErrRefused) || s.errs[0].Reason != ReasonRefused || s.errs[0].Line != 1 ||
		!strings.Contains(s.errs[0].Error(), "m.c") || !strings.Contains(s.errs[1].Error(), "n.x") || s.errs[1].Line != 3 {
		t.Errorf("errors %v", s.errs)
	}
	// A name taken by another series is refused as well: tag values with '.'.
	in, s = newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	in.Feed("f", []byte("m,a=x.y f=1 1700000000000000000\nm,a=x,b=y f=2 1700000000000000000\n"))
	if in.Channels().Len() != 1 || len(s.errs) != 1 || !errors.Is(s.errs[0], ErrRefused) {
		t.Errorf("collision: channels %v errors %v", in.Channels().Names(nil), s.errs)
	}
}

// TestNowStamp: with Options.Now, lines without timestamp get the receive
// time.
func TestNowStamp(t *testing.T) {
	now := time.Unix(1_700_000_000, 400e6) // in the frame at 1_700_000_000 s
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}, Now: func() time.Time { return now }})
	latest, _ := in.Feed("f", []byte("m x=1\n"))
	in.Flush()
	if !latest.Equal(now) || len(s.frames) != 1 || !s.frames[0].Start.Equal(time.Unix(1_700_000_000, 0)) {
		t.Errorf("latest %v frames %+v", latest, s.frames)
	}
}

// TestPrecisionRange: a millisecond timestamp read as seconds is far outside
// MaxTime and rejected, not wrapped around.
func TestPrecisionRange(t *testing.T) {
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}, Precision: lineprotocol.Second})
	in.Feed("f", []byte("m x=1 1700000000000\nm x=1 1700000000\n"))
	if len(s.errs) != 1 || s.errs[0].Reason != ReasonTimeRange || in.Stats().Accepted != 1 {
		t.Errorf("errors %v stats %+v", s.errs, in.Stats())
	}
	if _, err := NewIntake(&Channels{}, Options{Precision: 9}, nil); err == nil {
		t.Error("unknown precision accepted")
	}
}
