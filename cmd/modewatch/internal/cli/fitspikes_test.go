package cli

import (
	"bytes"
	"io"
	"testing"

	"modewatch/alerts"
)

// fit prints per unit the spike sizes its normal log taught, channel names
// without the unit, and the channels with no spike rule.
func TestPrintSpikes(t *testing.T) {
	cases := []profileCase{
		{"mixed", []alerts.ChannelProfile{
			{Channel: "u.flow", SpikeSize: 2.3237, SpikeMax: 1, SpikeSpanFrames: 180},
			{Channel: "u.state"},
			{Channel: "u.temp", SpikeSize: 0.076791, SpikeMax: 0, SpikeSpanFrames: 180},
		}, "  spike sizes (most spikes of the normal log within 1h0m0s): flow 2.324 (1), temp 0.07679 (0); no spike rule: state\n"},
		{"none learned", []alerts.ChannelProfile{{Channel: "u.state"}},
			"  spike sizes (most spikes of the normal log within 1h0m0s): none; no spike rule: state\n"},
		{"no profiles", nil, ""},
	}
	checkPrinter(t, printSpikes, cases)
}

// fit prints per unit the normal level steps its log taught and the
// channels without a level-shift rule; nothing without any level.
func TestPrintLevels(t *testing.T) {
	cases := []profileCase{
		{"mixed", []alerts.ChannelProfile{
			{Channel: "u.flow", LevelStepMax: 1.2345},
			{Channel: "u.state", Levels: 2},
			{Channel: "u.temp", LevelStepMax: 0.5},
		}, "  level steps (largest of the normal log's later half, σ of each channel's residual given the others; a shift beyond 1.5 times): flow 1.23, temp 0.5; no level-shift rule: state\n"},
		{"none learned", []alerts.ChannelProfile{{Channel: "u.state"}}, ""},
		{"no profiles", nil, ""},
	}
	checkPrinter(t, printLevels, cases)
}

// profileCase is one case of a printer of fit's per-unit profile lines.
type profileCase = struct {
	name     string
	profiles []alerts.ChannelProfile
	want     string
}

// checkPrinter runs print for unit "u" with indent "  " on every case and
// compares its output with the case's.
func checkPrinter(t *testing.T, print func(w io.Writer, unit, indent string, profiles []alerts.ChannelProfile), cases []profileCase) {
	t.Helper()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var b bytes.Buffer
			print(&b, "u", "  ", c.profiles)
			if b.String() != c.want {
				t.Errorf("got  %q\nwant %q", b.String(), c.want)
			}
		})
	}
}
