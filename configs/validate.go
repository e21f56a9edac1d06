package configs

import (
	"fmt"
	"math"
	"net/url"
	"strings"
	"time"

	"modewatch/tracker"
)

// Validate checks the configuration and returns every problem at once as
// Errors (each naming the key path; Load adds file:line:column), or nil.
// It checks the effective values, so call ApplyDefaults first when the
// Config was built in code with empty fields that must be defaulted.
func (c *Config) Validate() error {
	v := &validator{}
	c.validateServer(v)
	c.validateIntake(v)
	c.validateFrames(v)
	c.validateChannelsAndUnits(v)
	v.model("model", c.Model, false)
	v.alerts("alerts", c.Alerts, false)
	c.validateDelivery(v)
	c.HTTP.validate(v)
	c.validateCluster(v)
	if c.CheckpointInterval < 0 || (c.CheckpointInterval > 0 && c.CheckpointInterval < time.Second) {
		v.add("checkpoint_interval", "%v is too short (at least 1s)", c.CheckpointInterval)
	}
	v.oneOf("log.format", c.Log.Format, "text", "json")
	v.oneOf("log.level", c.Log.Level, "debug", "info", "warn", "error")
	if len(v.errs) == 0 {
		return nil
	}
	return v.errs
}

type validator struct{ errs Errors }

func (v *validator) add(path, format string, args ...any) {
	v.errs = append(v.errs, &Error{Path: path, Msg: fmt.Sprintf(format, args...)})
}

// oneOf accepts "" (default) or one of the allowed values.
func (v *validator) oneOf(path, got string, allowed ...string) {
	if got == "" {
		return
	}
	for _, a := range allowed {
		if got == a {
			return
		}
	}
	v.add(path, "%q is not one of %s", got, strings.Join(allowed, ", "))
}

func (c *Config) validateServer(v *validator) {
	s := c.Server
	for i, u := range s.URLs {
		p, err := url.Parse(u)
		switch {
		case err != nil || p.Host == "":
			v.add(fmt.Sprintf("server.urls[%d]", i), "%q is not a server URL (e.g. nats://host:4222)", u)
		case p.Scheme != "nats" && p.Scheme != "tls" && p.Scheme != "ws" && p.Scheme != "wss":
			v.add(fmt.Sprintf("server.urls[%d]", i), "scheme %q: want nats, tls, ws or wss", p.Scheme)
		}
	}
	auth := 0
	if s.User != "" || s.Password != "" {
		auth++
		if s.User == "" {
			v.add("server.password", "password given without user")
		}
	}
	for _, x := range []string{s.Token, s.NKeySeedFile, s.CredentialsFile} {
		if x != "" {
			auth++
		}
	}
	if auth > 1 {
		v.add("server", "give at most one of user/password, token, nkey_seed_file, credentials_file")
	}
	if (s.TLS.Cert == "") != (s.TLS.Key == "") {
		v.add("server.tls", "cert and key go together: give both or neither")
	}
	if len(s.URLs) == 0 && auth > 0 {
		v.add("server", "authentication is configured but no urls: the embedded server takes no credentials")
	}
	if !validToken(s.Prefix) {
		v.add("server.prefix", "%q is not a valid subject prefix (letters, digits, '-', '_', separated by '.')", s.Prefix)
	}
	c.validateNATSUsers(v)
	if s.EmbeddedPort < -1 || s.EmbeddedPort > 65535 {
		v.add("server.embedded_port", "%d is not a port (0..65535, or -1 for any free port)", s.EmbeddedPort)
	}
}

// validToken reports whether s is a dot-separated subject without
// wildcards or whitespace.
func validToken(s string) bool {
	if s == "" {
		return true
	}
	for _, part := range strings.Split(s, ".") {
		if part == "" || strings.ContainsAny(part, " \t\r\n*>") {
			return false
		}
	}
	return true
}

// validSubject reports whether s is a subject, wildcards allowed ('*' as a
// whole token, '>' as the last token).
func validSubject(s string) bool {
	if s == "" {
		return false
	}
	parts := strings.Split(s, ".")
	for i, part := range parts {
		if part == "" || strings.ContainsAny(part, " \t\r\n") {
			return false
		}
		if strings.Contains(part, ">") && (part != ">" || i != len(parts)-1) {
			return false
		}
		if strings.Contains(part, "*") && part != "*" {
			return false
		}
	}
	return true
}

func (c *Config) validateIntake(v *validator) {
	for i, s := range c.Intake.Subjects {
		if !validSubject(s) {
			v.add(fmt.Sprintf("intake.subjects[%d]", i), "%q is not a valid subject", s)
		}
	}
	c.validateIntakeLimits(v)
	js := c.Intake.JetStream
	if js.Durable != "" && js.Stream == "" {
		v.add("intake.jetstream", "durable %q needs a stream", js.Durable)
	}
	for _, x := range []struct{ path, name string }{{"intake.jetstream.stream", js.Stream}, {"intake.jetstream.durable", js.Durable}} {
		if strings.ContainsAny(x.name, " \t.*>") {
			v.add(x.path, "%q may not contain spaces, '.', '*' or '>'", x.name)
		}
	}
	for i, s := range js.Subjects {
		if !validSubject(s) {
			v.add(fmt.Sprintf("intake.jetstream.subjects[%d]", i), "%q is not a valid subject", s)
		}
	}
	for i, f := range c.Intake.Files {
		if f == "" {
			v.add(fmt.Sprintf("intake.files[%d]", i), "empty file name")
		}
	}
	if q := c.Intake.Queue; q.Messages < 0 || q.Bytes < 0 {
		v.add("intake.queue", "messages %d and bytes %d may not be negative (0: default)", q.Messages, q.Bytes)
	}
}

func (c *Config) validateFrames(v *validator) {
	f := c.Frames
	if f.Period < 0 {
		v.add("frames.period", "negative")
	}
	if f.Period > 0 && f.Period < time.Millisecond {
		v.add("frames.period", "%v is shorter than 1ms", f.Period)
	}
	if f.Period > 0 {
		if f.Staleness > 0 && f.Staleness < f.Period {
			v.add("frames.staleness", "%v is shorter than the period %v", f.Staleness, f.Period)
		}
		if f.ClockJump > 0 && f.ClockJump <= f.Period {
			v.add("frames.clock_jump", "%v must be longer than the period %v", f.ClockJump, f.Period)
		}
	}
	v.oneOf("frames.precision", f.Precision, "ns", "us", "ms", "s")
	if f.MaxChannels < 0 || f.MaxChannels > MaxChannelsCeiling {
		v.add("frames.max_channels", "%d is outside 0…%d", f.MaxChannels, MaxChannelsCeiling)
	}
}

func (c *Config) validateChannelsAndUnits(v *validator) {
	names := map[string]int{}
	series := map[string]int{}
	for i, ch := range c.Channels {
		p := fmt.Sprintf("channels[%d]", i)
		if ch.Measurement == "" {
			v.add(p+".measurement", "missing (which line-protocol measurement holds this channel?)")
		}
		if ch.Field == "" {
			v.add(p+".field", "missing (which field of the line holds the value?)")
		}
		name := c.ChannelName(i)
		if j, dup := names[name]; dup {
			v.add(p+".name", "channel %q is already defined as channels[%d]", name, j)
		} else {
			names[name] = i
		}
		key := seriesKey(ch)
		if j, dup := series[key]; dup && ch.Measurement != "" && ch.Field != "" {
			v.add(p, "reads the same measurement, tags and field as channels[%d]", j)
		} else {
			series[key] = i
		}
		if ch.Min != nil && ch.Max != nil && !(*ch.Min < *ch.Max) {
			v.add(p+".max", "valid range is empty: min %g is not below max %g", *ch.Min, *ch.Max)
		}
	}
	owner := map[string]int{}
	unitNames := map[string]int{}
	for ui, u := range c.Units {
		p := fmt.Sprintf("units[%d]", ui)
		if u.Name == "" {
			v.add(p+".name", "missing")
		} else if !validToken(u.Name) || strings.Contains(u.Name, ".") {
			v.add(p+".name", "%q must be one subject token (letters, digits, '-', '_'; no '.', spaces or wildcards)", u.Name)
		}
		if j, dup := unitNames[u.Name]; dup && u.Name != "" {
			v.add(p+".name", "unit %q is already defined as units[%d]", u.Name, j)
		} else {
			unitNames[u.Name] = ui
		}
		for ci, ch := range u.Channels {
			cp := fmt.Sprintf("%s.channels[%d]", p, ci)
			if j, dup := owner[ch]; dup {
				v.add(cp, "channel %q already belongs to unit %q (a channel belongs to one unit)", ch, c.Units[j].Name)
				continue
			}
			owner[ch] = ui
			if len(c.Channels) > 0 {
				if _, ok := names[ch]; !ok {
					v.add(cp, "channel %q is not in the channel map", ch)
				}
			}
		}
		v.model(p+".model", u.Model, true)
		v.alerts(p+".alerts", u.Alerts, true)
	}
	c.validateDrivers(v, names, owner)
	for i, ch := range c.Channels {
		if ch.Unit == "" {
			continue
		}
		if len(c.Units) > 0 {
			if _, ok := unitNames[ch.Unit]; !ok {
				v.add(fmt.Sprintf("channels[%d].unit", i), "unit %q is not defined in units", ch.Unit)
				continue
			}
		}
		if ui, ok := owner[c.ChannelName(i)]; ok && c.Units[ui].Name != ch.Unit {
			v.add(fmt.Sprintf("channels[%d].unit", i), "says unit %q but units[%d] (%q) lists this channel", ch.Unit, ui, c.Units[ui].Name)
		}
	}
}

func seriesKey(ch Channel) string {
	return ch.Measurement + "\x00" + tagValues(ch.Tags, "\x00") + "\x00" + ch.Field
}

// ChannelName returns the name of channel i of the map: its Name, or the
// auto-discovery form measurement.tagvalues.field (tag values in tag-key
// order).
func (c *Config) ChannelName(i int) string {
	ch := c.Channels[i]
	if ch.Name != "" {
		return ch.Name
	}
	parts := []string{ch.Measurement}
	if tv := tagValues(ch.Tags, "."); tv != "" {
		parts = append(parts, tv)
	}
	parts = append(parts, ch.Field)
	return strings.Join(parts, ".")
}

func tagValues(tags map[string]string, sep string) string {
	keys := make([]string, 0, len(tags))
	for k := range tags {
		keys = append(keys, k)
	}
	sortStrings(keys)
	vals := make([]string, len(keys))
	for i, k := range keys {
		vals[i] = tags[k]
	}
	return strings.Join(vals, sep)
}

func sortStrings(s []string) {
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
}

// model checks model settings; partial allows zero fields (unit overrides).
func (v *validator) model(p string, m Model, partial bool) {
	if m.Sparsity != "" {
		if err := CheckSparsity(m.Sparsity); err != nil {
			v.add(p+".sparsity", "%v", err)
		}
	}
	if m.MaxModes < 0 {
		v.add(p+".max_modes", "negative")
	}
	if m.Lags < 0 || m.Lags > tracker.MaxLags {
		v.add(p+".lags", "%d lagged copies, want 0 to %d", m.Lags, tracker.MaxLags)
	}
	if m.Smoothing != 0 && !(m.Smoothing > 0 && m.Smoothing < 1) {
		v.add(p+".smoothing", "%g is not an EWMA weight in (0, 1)", m.Smoothing)
	}
	if m.MewmaLambda != 0 && !(m.MewmaLambda > 0 && m.MewmaLambda < 1) {
		v.add(p+".mewma_lambda", "%g is not an EWMA weight in (0, 1)", m.MewmaLambda)
	}
	if m.CreepLambda != 0 && !(m.CreepLambda > 0 && m.CreepLambda < 1) {
		v.add(p+".creep_lambda", "%g is not an EWMA weight in (0, 1)", m.CreepLambda)
	}
	if m.LevelWindow < 0 {
		v.add(p+".level_window", "negative")
	}
	if m.Statistics != "" {
		if _, err := ParseStatistics(m.Statistics); err != nil {
			v.add(p+".statistics", "%v", err)
		}
	}
	if err := CheckStateScoring(m.StateScoring); m.StateScoring != "" && err != nil {
		v.add(p+".state_scoring", "%v", err)
	}
	if m.Modes.Count > 0 && m.MaxModes > 0 && m.Modes.Count > m.MaxModes && !partial {
		v.add(p+".modes", "%d modes is more than max_modes %d", m.Modes.Count, m.MaxModes)
	}
	if m.HalfLife < 0 {
		v.add(p+".halflife", "negative")
	}
	if math.IsNaN(m.ResolutionFloor) || math.IsInf(m.ResolutionFloor, 0) {
		v.add(p+".resolution_floor", "%g is not a finite multiple of the resolution", m.ResolutionFloor)
	}
	if math.IsNaN(m.DriverLevel) || m.DriverLevel >= 0.5 || math.IsInf(m.DriverLevel, -1) {
		v.add(p+".driver_level", "%g is not a significance level in (0, 0.5) (negative: no test)", m.DriverLevel)
	}
	switch m.Shrink {
	case "", ShrinkNone, ShrinkWhole, ShrinkChannel:
	default:
		v.add(p+".shrink", "%q: want %s, %s or %s", m.Shrink, ShrinkNone, ShrinkWhole, ShrinkChannel)
	}
	if m.Alpha != 0 && !(m.Alpha > 0 && m.Alpha < 0.5) {
		v.add(p+".alpha", "%g is not a false-alarm rate in (0, 0.5)", m.Alpha)
	}
	if m.RefreshEvery < 0 {
		v.add(p+".refresh_every", "negative")
	}
	if m.WarmUp < 0 {
		v.add(p+".warmup", "negative")
	}
	if m.MaxChannels < 0 || m.MaxChannels > UnitMaxChannelsCeiling {
		v.add(p+".max_channels", "%d is outside 0…%d (a unit's model needs about %d·p² bytes)", m.MaxChannels, UnitMaxChannelsCeiling, UnitModelBytesSq)
	}
	if !partial && m.Alpha == 0 {
		v.add(p+".alpha", "missing")
	}
}

func (v *validator) alerts(p string, a Alerts, partial bool) {
	if math.IsNaN(a.Budget) || math.IsInf(a.Budget, 0) || a.Budget > 1440 {
		v.add(p+".budget", "%v false alerts per day: want a finite number up to 1440 (negative: off)", a.Budget)
	}
	if a.CalibrationFolds != 0 && partial {
		v.add(p+".calibration_folds", "set at the top level only (alerts.calibration_folds): one calibration serves every unit")
	} else if a.CalibrationFolds < 0 || a.CalibrationFolds > MaxCalibrationFolds {
		v.add(p+".calibration_folds", "%d blocks: want 1 to %d (0: the default, %d)", a.CalibrationFolds, MaxCalibrationFolds, DefaultCalibrationFolds)
	}
	switch {
	case a.CalibrationShape != "" && partial:
		v.add(p+".calibration_shape", "set at the top level only (alerts.calibration_shape): one calibration serves every unit")
	case a.CalibrationShape != "" && a.CalibrationShape != ShapeShared && a.CalibrationShape != ShapeOwn:
		v.add(p+".calibration_shape", "%q: want %s or %s", a.CalibrationShape, ShapeShared, ShapeOwn)
	}
	od := a.OnDelay
	if od != (OnDelay{}) || !partial {
		if od.N < 1 || od.M < od.N {
			v.add(p+".on_delay", "n=%d of m=%d: want 1 ≤ n ≤ m", od.N, od.M)
		} else if od.M > 64 {
			v.add(p+".on_delay.m", "%d frames is more than 64", od.M)
		}
	}
	if a.OnSpan < 0 {
		v.add(p+".on_span", "negative")
	}
	if a.OffDelay < 0 {
		v.add(p+".off_delay", "negative")
	}
	if a.LocationQuiet < 0 {
		v.add(p+".location_quiet", "negative")
	}
	if a.ReopenWithin < 0 {
		v.add(p+".reopen_within", "negative")
	}
	if !(a.SpecificShare >= 0 && a.SpecificShare <= 1) {
		v.add(p+".specific_share", "%g is not a share of the index in [0, 1]", a.SpecificShare)
	}
	if math.IsNaN(a.AcceptWeight) || math.IsInf(a.AcceptWeight, 0) || a.AcceptWeight > 10 {
		v.add(p+".accept_weight", "must be a finite number, at most 10")
	}
	if a.Deadband < 0 || a.Deadband >= 1 {
		v.add(p+".deadband", "%g is not a fraction of the limit in [0, 1)", a.Deadband)
	}
	for i, b := range a.Severity {
		bp := fmt.Sprintf("%s.severity[%d]", p, i)
		if b.Name == "" {
			v.add(bp+".name", "missing")
		}
		if b.Ratio <= 0 {
			v.add(bp+".ratio", "%g: want a ratio to the limit above 0", b.Ratio)
		}
		if i > 0 && b.Ratio <= a.Severity[i-1].Ratio {
			v.add(bp+".ratio", "%g is not above the previous band's %g (bands go up)", b.Ratio, a.Severity[i-1].Ratio)
		}
	}
	for _, r := range []struct {
		name string
		r    RateRule
	}{{"flood", a.Flood}, {"chattering", a.Chatter}} {
		if partial && r.r == (RateRule{}) {
			continue // inherited
		}
		if r.r.Count < 2 {
			v.add(p+"."+r.name+".count", "%d: want at least 2", r.r.Count)
		}
		if r.r.Window <= 0 {
			v.add(p+"."+r.name+".window", "missing or zero")
		}
	}
}

func (c *Config) validateDelivery(v *validator) {
	s := c.Delivery
	if s.Subject != "" && !validToken(s.Subject) {
		v.add("delivery.subject", "%q is not a valid subject to publish on (no wildcards)", s.Subject)
	}
	if s.Webhook != "" {
		u, err := url.Parse(s.Webhook)
		if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
			v.add("delivery.webhook", "%q is not an http(s) URL", s.Webhook)
		}
	}
	if s.Queue < 0 {
		v.add("delivery.queue", "negative")
	}
}
