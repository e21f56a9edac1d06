package alerts

import (
	"fmt"
	"testing"
)

// TestRecordChannels: a model incident names its ranked contributors (the
// first n), a data-quality alert its one channel and kind.
func TestRecordChannels(t *testing.T) {
	model := &Record{Peak: Peak{Statistic: StatSPE}, Contributors: []RecordContributor{{Channel: "u.a.x"}, {Channel: "u.b.x"}, {Channel: "u.c.x"}, {Channel: "u.d.x"}}}
	quality := &Record{Peak: Peak{Statistic: QualityStuck}, Quality: &RecordQuality{Kind: QualityStuck, Channel: "u.q.x"}}
	for _, c := range []struct {
		r    *Record
		n    int
		want string
	}{
		{model, 3, "spe [u.a.x u.b.x u.c.x]"},
		{model, 0, "spe [u.a.x u.b.x u.c.x u.d.x]"},
		{quality, 3, "stuck [u.q.x]"},
	} {
		about, chans := c.r.Channels(c.n)
		if got := fmt.Sprint(about, " ", chans); got != c.want {
			t.Errorf("Channels(%d) = %s, want %s", c.n, got, c.want)
		}
	}
}
