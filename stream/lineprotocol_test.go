package stream

import (
	"testing"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
	"gonum.org/v1/gonum/floats/scalar"
)

// The cases below come from the InfluxDB v2 line protocol reference,
// docs.influxdata.com/influxdb/v2/reference/syntax/line-protocol/.

var fixedNow = time.Date(2019, 5, 2, 16, 12, 41, 0, time.UTC)

// decodeOne feeds lines into a fresh intake (1 s frames, lines without a
// timestamp stamped fixedNow), flushes, and returns the intake, the last
// frame (nil if none) and the sink.
func decodeOne(t *testing.T, lines string, prec lineprotocol.Precision, specs ...ChannelSpec) (*Intake, *frameCopy, *sink) {
	t.Helper()
	in, s := newTestIntake(t, Options{
		Align:     AlignConfig{Period: time.Second},
		Precision: prec,
		Now:       func() time.Time { return fixedNow },
	}, specs...)
	if _, err := in.Feed("doc", []byte(lines)); err != nil {
		t.Fatal(err)
	}
	if err := in.Flush(); err != nil {
		t.Fatal(err)
	}
	if len(s.frames) == 0 {
		return in, nil, s
	}
	return in, &s.frames[len(s.frames)-1], s
}

// value returns the last frame's value of channel name.
func value(t *testing.T, in *Intake, f *frameCopy, name string) float64 {
	t.Helper()
	i, ok := in.Channels().Index(name)
	if !ok {
		t.Fatalf("no channel %q; have %q", name, in.Channels().Names(nil))
	}
	if f == nil {
		t.Fatalf("no frame")
	}
	if f.Missing[i] {
		t.Fatalf("channel %q missing", name)
	}
	return f.Values[i]
}

// TestReferenceNumbers decodes the field-value examples of the reference
// (sections Float, Integer, UInteger, including the documented minimum and
// maximum) and checks channel name and value.
func TestReferenceNumbers(t *testing.T) {
	tests := []struct {
		line string
		name string
		want float64
	}{
		// refDoc, "Float field value examples".
		{"myMeasurement fieldKey=1.0", "myMeasurement.fieldKey", 1},
		{"myMeasurement fieldKey=1", "myMeasurement.fieldKey", 1},
		{"myMeasurement fieldKey=-1.234456e+78", "myMeasurement.fieldKey", -1.234456e+78},
		// refDoc, "Integer field value examples" and its minimum/maximum table.
		{"myMeasurement fieldKey=1i", "myMeasurement.fieldKey", 1},
		{"myMeasurement fieldKey=12485903i", "myMeasurement.fieldKey", 12485903},
		{"myMeasurement fieldKey=-12485903i", "myMeasurement.fieldKey", -12485903},
		{"myMeasurement fieldKey=-9223372036854775808i", "myMeasurement.fieldKey", -9223372036854775808},
		// 2^63-1 rounds to the nearest float64, 2^63 (IEEE 754 round to nearest).
		{"myMeasurement fieldKey=9223372036854775807i", "myMeasurement.fieldKey", 9223372036854775808},
		// refDoc, "UInteger field value examples" and its minimum/maximum table.
		{"myMeasurement fieldKey=1u", "myMeasurement.fieldKey", 1},
		{"myMeasurement fieldKey=12485903u", "myMeasurement.fieldKey", 12485903},
		{"myMeasurement fieldKey=0u", "myMeasurement.fieldKey", 0},
		{"myMeasurement fieldKey=18446744073709551615u", "myMeasurement.fieldKey", 18446744073709551616},
	}
	for _, tt := range tests {
		t.Run(tt.line, func(t *testing.T) {
			in, f, s := decodeOne(t, tt.line, lineprotocol.Nanosecond)
			if got := value(t, in, f, tt.name); !scalar.EqualWithinAbsOrRel(got, tt.want, 0, 1e-15) {
				t.Errorf("%s = %v, want %v", tt.name, got, tt.want)
			}
			if st := in.Stats(); st.Accepted != 1 || st.Rejected() != 0 || len(s.errs) != 0 {
				t.Errorf("accepted %d rejected %d errors %v", st.Accepted, st.Rejected(), s.errs)
			}
		})
	}
}

// TestReferenceBooleans: refDoc, "Boolean" table (t, T, true, True, TRUE;
// f, F, false, False, FALSE). A channel with BoolAsNumber maps them to 1/0;
// auto-discovery ignores and counts them.
func TestReferenceBooleans(t *testing.T) {
	spec := ChannelSpec{Measurement: "myMeasurement", Field: "fieldKey", BoolAsNumber: true}
	for _, tt := range []struct {
		lit  string
		want float64
	}{
		{"t", 1}, {"T", 1}, {"true", 1}, {"True", 1}, {"TRUE", 1},
		{"f", 0}, {"F", 0}, {"false", 0}, {"False", 0}, {"FALSE", 0},
	} {
		t.Run(tt.lit, func(t *testing.T) {
			line := "myMeasurement fieldKey=" + tt.lit
			in, f, _ := decodeOne(t, line, lineprotocol.Nanosecond, spec)
			if got := value(t, in, f, "myMeasurement.fieldKey"); got != tt.want {
				t.Errorf("mapped: got %v, want %v", got, tt.want)
			}
			in, _, _ = decodeOne(t, line, lineprotocol.Nanosecond)
			if st := in.Stats(); st.Bools != 1 || in.Channels().Len() != 0 || st.Accepted != 1 {
				t.Errorf("auto: bools %d channels %d accepted %d, want 1 0 1", st.Bools, in.Channels().Len(), st.Accepted)
			}
		})
	}
}

// TestReferenceEscapes: refDoc, "Special Characters": measurement escapes
// comma and space; tag keys, tag values and field keys escape comma, equals
// sign and space; string field values escape double quote and backslash.
// Names are the unescaped texts joined as measurement.tagvalues.field.
func TestReferenceEscapes(t *testing.T) {
	tests := []struct {
		name    string
		line    string
		want    map[string]float64
		strings uint64
	}{
		// refDoc example "Tag keys and values with spaces", verbatim.
		{"tag spaces", `myMeasurement,tag\ Key1=tag\ Value1,tag\ Key2=tag\ Value2 fieldKey=100`,
			map[string]float64{"myMeasurement.tag Value1.tag Value2.fieldKey": 100}, 0},
		// refDoc example "Measurement name with spaces", with the string value
		// replaced by a float so that it makes a channel; and the same with
		// the measurement's other escape, the comma.
		{"measurement space", `my\ Measurement fieldKey=1.5`, map[string]float64{"my Measurement.fieldKey": 1.5}, 0},
		{"measurement comma", `my\,Measurement fieldKey=2.5`, map[string]float64{"my,Measurement.fieldKey": 2.5}, 0},
		// Escape table: comma, equals sign and space in tag key, tag value and
		// field key.
		{"key escapes", `m,tag\=key\ 1=a\,b\=c\ d field\,key\=x\ y=3i`,
			map[string]float64{"m.a,b=c d.field,key=x y": 3}, 0},
		// refDoc example "Emojis", with a float field added next to the string.
		{"emojis", `myMeasurement,tagKey=🍭 fieldKey="Launch 🚀",v=7 1556813561098000000`,
			map[string]float64{"myMeasurement.🍭.v": 7}, 1},
		// refDoc example "Double quotes in a string field value", verbatim:
		// accepted, the string ignored and counted.
		{"quoted string", `myMeasurement fieldKey="\"string\" within a string"`, nil, 1},
		// A string holding the separators (comma, space, equals) and escaped
		// quotes and backslashes, between numeric fields.
		{"string between numbers", `m a=1,s="x, \"y\" z=3 \\ w",b=2u`, map[string]float64{"m.a": 1, "m.b": 2}, 1},
		// refDoc, "Comments": a line starting with # is ignored.
		{"comment", "# This is a comment\nmyMeasurement fieldKey=4 1556813561098000000",
			map[string]float64{"myMeasurement.fieldKey": 4}, 0},
		// Tags out of key order still give tag values in key order (names are
		// stable whatever order a gateway writes tags in).
		{"tag order", `coolwater,zone=east,asset=pump2 flow=1`, map[string]float64{"coolwater.pump2.east.flow": 1}, 0},
		// The example of the issue: coolwater,asset=pump2 flow=1 -> coolwater.pump2.flow.
		{"issue example", `coolwater,asset=pump2 flow=1`, map[string]float64{"coolwater.pump2.flow": 1}, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			in, f, s := decodeOne(t, tt.line, lineprotocol.Nanosecond)
			if len(s.errs) != 0 {
				t.Fatalf("errors: %v", s.errs)
			}
			if got := in.Channels().Len(); got != len(tt.want) {
				t.Errorf("channels %q, want %d", in.Channels().Names(nil), len(tt.want))
			}
			for name, want := range tt.want {
				if got := value(t, in, f, name); got != want {
					t.Errorf("%s = %v, want %v", name, got, want)
				}
			}
			if st := in.Stats(); st.Strings != tt.strings || st.Accepted != 1 || st.Lines != 1 {
				t.Errorf("strings %d accepted %d lines %d, want %d 1 1", st.Strings, st.Accepted, st.Lines, tt.strings)
			}
		})
	}
}

// TestReferencePrecision: the reference's example timestamp
// 1556813561098000000 ns is 2019-05-02T16:12:41.098Z; written in µs, ms and
// s (refDoc, "Unix timestamp": default precision ns, others specified by the
// writer) it is the same instant, truncated to the precision.
func TestReferencePrecision(t *testing.T) {
	tests := []struct {
		prec lineprotocol.Precision
		ts   string
		want time.Time
	}{
		{lineprotocol.Nanosecond, "1556813561098000000", time.Date(2019, 5, 2, 16, 12, 41, 98e6, time.UTC)},
		{lineprotocol.Microsecond, "1556813561098000", time.Date(2019, 5, 2, 16, 12, 41, 98e6, time.UTC)},
		{lineprotocol.Millisecond, "1556813561098", time.Date(2019, 5, 2, 16, 12, 41, 98e6, time.UTC)},
		{lineprotocol.Second, "1556813561", time.Date(2019, 5, 2, 16, 12, 41, 0, time.UTC)},
	}
	for _, tt := range tests {
		t.Run(tt.prec.String(), func(t *testing.T) {
			in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Millisecond}, Precision: tt.prec})
			latest, err := in.Feed("doc", []byte("myMeasurementName fieldKey=1,other=\"fieldValue\" "+tt.ts))
			if err != nil {
				t.Fatal(err)
			}
			if !latest.Equal(tt.want) {
				t.Errorf("latest event time %v, want %v", latest, tt.want)
			}
			in.Flush()
			if len(s.frames) != 1 || !s.frames[0].Start.Equal(tt.want) {
				t.Errorf("frames %+v, want one starting %v", s.frames, tt.want)
			}
		})
	}
}

// TestReferenceDuplicatePoints: refDoc, "Duplicate points": the same
// measurement, tag set and timestamp with a different field set gives the
// union of the field sets, conflicts favouring the new one.
func TestReferenceDuplicatePoints(t *testing.T) {
	in, f, _ := decodeOne(t, "m,asset=a x=1,y=2 1556813561000000000\nm,asset=a y=3,z=4 1556813561000000000\n", lineprotocol.Nanosecond)
	for name, want := range map[string]float64{"m.a.x": 1, "m.a.y": 3, "m.a.z": 4} {
		if got := value(t, in, f, name); got != want {
			t.Errorf("%s = %v, want %v", name, got, want)
		}
	}
	if d := in.Stats().Duplicate; d != 1 {
		t.Errorf("duplicates %d, want 1 (field y)", d)
	}
}
