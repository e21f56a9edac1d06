package configs

import (
	"strings"
	"testing"
)

// model.lags takes 0 to tracker.MaxLags lagged copies, at the top level
// and per unit; anything else is reported at its key.
func TestLagsValidation(t *testing.T) {
	for _, c := range []struct {
		yaml, want string
	}{
		{"model: {lags: 2}\n", ""},
		{"model: {lags: -1}\n", "model.lags"},
		{"model: {lags: 9}\n", "model.lags"},
		{"units: [{name: a, model: {lags: 20}}]\n", "lags"},
	} {
		_, err := Parse("t.yaml", []byte(c.yaml))
		switch {
		case c.want == "" && err != nil:
			t.Errorf("%q: %v", c.yaml, err)
		case c.want != "" && (err == nil || !strings.Contains(err.Error(), c.want)):
			t.Errorf("%q: error %v, want one naming %s", c.yaml, err, c.want)
		}
	}
}
