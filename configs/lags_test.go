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
		checkKeyError(t, c.yaml, c.want)
	}
}

// checkKeyError parses the configuration text y and checks that it is
// accepted (want "") or refused with an error naming want.
func checkKeyError(t *testing.T, y, want string) {
	t.Helper()
	_, err := Parse("t.yaml", []byte(y))
	switch {
	case want == "" && err != nil:
		t.Errorf("%q: %v", y, err)
	case want != "" && (err == nil || !strings.Contains(err.Error(), want)):
		t.Errorf("%q: error %v, want one naming %s", y, err, want)
	}
}
