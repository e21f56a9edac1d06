package configs

import (
	"strings"
	"testing"
)

// TestSettingParseForms checks the settings read by setParsed and
// setChecked: a good value is stored and its normal form returned (the
// limits' text as given, since Limits.String writes it back unchanged);
// a bad one is refused and stores nothing.
func TestSettingParseForms(t *testing.T) {
	for _, c := range []struct {
		name, text, want string
		bad              bool
		got              func(o Overrides) any
		field            any
	}{
		{name: "limits", text: "empirical:ref normal.lp", want: "empirical:ref normal.lp",
			got: func(o Overrides) any { return o.Model.Limits }, field: Limits{Method: LimitsEmpirical, File: "ref normal.lp"}},
		{name: "limits", text: "empirical:", bad: true, got: func(o Overrides) any { return o.Model.Limits }, field: Limits{}},
		{name: "modes", text: "auto:0.80", want: "auto:0.8",
			got: func(o Overrides) any { return o.Model.Modes }, field: ModeCount{Share: 0.8}},
		{name: "on_delay", text: "3/5", want: "3/5", got: func(o Overrides) any { return o.Alerts.OnDelay }, field: OnDelay{N: 3, M: 5}},
		{name: "on_delay", text: "6/5", bad: true, got: func(o Overrides) any { return o.Alerts.OnDelay }, field: OnDelay{}},
		{name: "sparsity", text: "l0:6", want: "l0:6", got: func(o Overrides) any { return o.Model.Sparsity }, field: "l0:6"},
		{name: "sparsity", text: "l0:0", bad: true, got: func(o Overrides) any { return o.Model.Sparsity }, field: ""},
		{name: "statistics", text: "t2,mewmaa", bad: true, got: func(o Overrides) any { return o.Model.Statistics }, field: ""},
		{name: "state_scoring", text: "likeliest", bad: true, got: func(o Overrides) any { return o.Model.StateScoring }, field: ""},
	} {
		var o Overrides
		text, err := LookupSetting(c.name).Parse(&o, c.text)
		if (err != nil) != c.bad || (!c.bad && text != c.want) {
			t.Errorf("%s %q: normal form %q, error %v; want %q, error %v", c.name, c.text, text, err, c.want, c.bad)
		}
		if got := c.got(o); got != c.field {
			t.Errorf("%s %q: field %+v, want %+v", c.name, c.text, got, c.field)
		}
	}
}

// TestParseStatisticsEvery checks that every name of model.statistics sets
// its own flag, and that an error lists every choice in list order.
func TestParseStatisticsEvery(t *testing.T) {
	got, err := ParseStatistics("creep,MEWMA, rel,var,res,phi,spe,t2")
	want := Statistics{T2: true, SPE: true, Phi: true, Residual: true, Variance: true, Relation: true, Mewma: true, Creep: true}
	if err != nil || got != want {
		t.Errorf("every statistic: %+v, %v", got, err)
	}
	for name, one := range map[string]Statistics{"t2": {T2: true}, "spe": {SPE: true}, "phi": {Phi: true}, "res": {Residual: true},
		"var": {Variance: true}, "rel": {Relation: true}, "mewma": {Mewma: true}, "creep": {Creep: true}} {
		if got, err := ParseStatistics(name); err != nil || got != one {
			t.Errorf("%q: %+v, %v", name, got, err)
		}
	}
	const choices = "(choose from t2, spe, phi, res, var, rel, mewma, creep)"
	for _, bad := range []string{"", "t2,nonesuch"} {
		if _, err := ParseStatistics(bad); err == nil || !strings.HasSuffix(err.Error(), choices) {
			t.Errorf("%q: error %v, want it to end %s", bad, err, choices)
		}
	}
}
