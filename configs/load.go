package configs

import (
	"encoding"
	"errors"
	"fmt"
	"math"
	"os"
	"reflect"
	"sort"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// Error is one problem in a configuration, with its place.
type Error struct {
	File   string // file name as given to Load/Parse
	Line   int    // 1-based; 0 when unknown (e.g. a missing key)
	Column int    // 1-based; 0 when unknown
	Path   string // dotted key path, e.g. "units[1].model.halflife"
	Msg    string
}

// Error formats as "file:line:column: path: message".
func (e *Error) Error() string {
	var b strings.Builder
	if e.File != "" {
		b.WriteString(e.File)
		b.WriteByte(':')
	}
	if e.Line > 0 {
		fmt.Fprintf(&b, "%d:%d:", e.Line, e.Column)
	}
	if b.Len() > 0 {
		b.WriteByte(' ')
	}
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteString(": ")
	}
	b.WriteString(e.Msg)
	return b.String()
}

// Errors is every problem found in a configuration, sorted by position.
type Errors []*Error

// Error lists every problem, one per line.
func (es Errors) Error() string {
	lines := make([]string, len(es))
	for i, e := range es {
		lines[i] = e.Error()
	}
	return "configs: " + strconv.Itoa(len(es)) + " problem(s):\n" + strings.Join(lines, "\n")
}

// ErrInvalid is wrapped by every error of Load, Parse and Validate that
// reports problems in the configuration itself (not I/O).
var ErrInvalid = errors.New("configs: invalid configuration")

// Is lets errors.Is(err, ErrInvalid) match an Errors value.
func (es Errors) Is(target error) bool { return target == ErrInvalid }

// Load reads the YAML file at path, applies defaults and validates. Every
// problem (unknown key, bad value, failed check) is reported at once in an
// Errors value with its file:line:column. An I/O failure is returned as is.
func Load(path string) (*Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("configs: %w", err)
	}
	return Parse(path, data)
}

// Parse is Load on data already read; name is used in error positions.
func Parse(name string, data []byte) (*Config, error) {
	var c Config
	d := decoder{file: name, pos: map[string][2]int{}}
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		return nil, Errors{d.yamlError(err)}
	}
	if root.Kind != 0 {
		d.decode(&root, reflect.ValueOf(&c).Elem(), "")
	}
	c.file, c.pos = name, d.pos
	c.ApplyDefaults()
	if verr := c.Validate(); verr != nil {
		var ves Errors
		if errors.As(verr, &ves) {
			for _, e := range ves {
				e.File = name
				if p, ok := d.lookup(e.Path); ok {
					e.Line, e.Column = p[0], p[1]
				}
				d.errs = append(d.errs, e)
			}
		}
	}
	if len(d.errs) > 0 {
		sortErrors(d.errs)
		return nil, d.errs
	}
	return &c, nil
}

func sortErrors(es Errors) {
	sort.SliceStable(es, func(i, j int) bool {
		a, b := es[i], es[j]
		if a.Line != b.Line {
			if a.Line == 0 || b.Line == 0 {
				return b.Line == 0 // located problems first
			}
			return a.Line < b.Line
		}
		return a.Column < b.Column
	})
}

// decoder walks a yaml.Node tree into a Go value by reflection, recording
// every error instead of stopping at the first, and the position of every
// key path so that Validate's errors can be placed too.
type decoder struct {
	file string
	errs Errors
	pos  map[string][2]int
}

var (
	durationType = reflect.TypeFor[time.Duration]()
	textType     = reflect.TypeFor[encoding.TextUnmarshaler]()
)

func (d *decoder) errorf(n *yaml.Node, path, format string, args ...any) {
	d.errs = append(d.errs, &Error{File: d.file, Line: n.Line, Column: n.Column, Path: path, Msg: fmt.Sprintf(format, args...)})
}

// yamlError turns a syntax error of the YAML parser into an Error.
func (d *decoder) yamlError(err error) *Error { return YAMLError(d.file, err) }

// YAMLError turns an error of the YAML parser on file into an Error: a
// syntax error ("yaml: line N: msg") keeps its line (column 1); any other
// error is kept whole, without a position. Every YAML reader of the
// project (configuration, tune grids, plant scenarios) reports through
// [Error].
func YAMLError(file string, err error) *Error {
	msg := err.Error()
	e := &Error{File: file, Msg: msg}
	if rest, ok := strings.CutPrefix(msg, "yaml: line "); ok {
		if i := strings.Index(rest, ":"); i > 0 {
			if n, err := strconv.Atoi(rest[:i]); err == nil {
				e.Line, e.Column = n, 1
				e.Msg = "YAML syntax: " + strings.TrimSpace(rest[i+1:])
			}
		}
	}
	return e
}

// lookup finds the recorded position of path or, failing that, of its
// closest recorded ancestor.
func (d *decoder) lookup(path string) ([2]int, bool) {
	for {
		if p, ok := d.pos[path]; ok {
			return p, true
		}
		i := strings.LastIndexAny(path, ".[")
		if i <= 0 {
			if p, ok := d.pos[""]; ok && path != "" {
				return p, true
			}
			return [2]int{}, false
		}
		path = path[:i]
	}
}

func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

func (d *decoder) decode(n *yaml.Node, v reflect.Value, path string) {
	for n.Kind == yaml.AliasNode {
		n = n.Alias
	}
	if n.Kind == yaml.DocumentNode {
		if len(n.Content) == 0 {
			return
		}
		d.decode(n.Content[0], v, path)
		return
	}
	if _, seen := d.pos[path]; !seen {
		d.pos[path] = [2]int{n.Line, n.Column}
	}
	if n.Kind == yaml.ScalarNode && n.ShortTag() == "!!null" {
		return // explicit null or empty value: keep the zero value (default)
	}
	// Text values (ModeCount, Limits) before kinds.
	if v.CanAddr() && v.Addr().Type().Implements(textType) {
		if n.Kind != yaml.ScalarNode {
			d.errorf(n, path, "want a single value, found %s", kindName(n))
			return
		}
		if err := v.Addr().Interface().(encoding.TextUnmarshaler).UnmarshalText([]byte(n.Value)); err != nil {
			d.errorf(n, path, "%v", err)
		}
		return
	}
	if v.Type() == durationType {
		if n.Kind != yaml.ScalarNode {
			d.errorf(n, path, "want a duration, found %s", kindName(n))
			return
		}
		dur, err := ParseDuration(n.Value)
		if err != nil {
			d.errorf(n, path, "%v", err)
			return
		}
		v.SetInt(int64(dur))
		return
	}
	switch v.Kind() {
	case reflect.Pointer:
		p := reflect.New(v.Type().Elem())
		before := len(d.errs)
		d.decode(n, p.Elem(), path)
		if len(d.errs) == before {
			v.Set(p)
		}
	case reflect.Struct:
		d.decodeStruct(n, v, path)
	case reflect.Slice:
		if n.Kind != yaml.SequenceNode {
			d.errorf(n, path, "want a list, found %s", kindName(n))
			return
		}
		s := reflect.MakeSlice(v.Type(), len(n.Content), len(n.Content))
		for i, c := range n.Content {
			d.decode(c, s.Index(i), fmt.Sprintf("%s[%d]", path, i))
		}
		v.Set(s)
	case reflect.Map:
		if n.Kind != yaml.MappingNode {
			d.errorf(n, path, "want a mapping of key: value, found %s", kindName(n))
			return
		}
		m := reflect.MakeMapWithSize(v.Type(), len(n.Content)/2)
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, val := n.Content[i], n.Content[i+1]
			if m.MapIndex(reflect.ValueOf(k.Value)).IsValid() {
				d.errorf(k, join(path, k.Value), "duplicate key %q", k.Value)
				continue
			}
			e := reflect.New(v.Type().Elem()).Elem()
			d.decode(val, e, join(path, k.Value))
			m.SetMapIndex(reflect.ValueOf(k.Value), e)
		}
		v.Set(m)
	case reflect.String:
		if n.Kind != yaml.ScalarNode {
			d.errorf(n, path, "want a string, found %s", kindName(n))
			return
		}
		v.SetString(n.Value)
	case reflect.Bool:
		if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!bool" {
			d.errorf(n, path, "want true or false, found %s", describe(n))
			return
		}
		b, _ := strconv.ParseBool(strings.ToLower(n.Value))
		v.SetBool(b)
	case reflect.Int, reflect.Int64:
		if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!int" {
			d.errorf(n, path, "want a whole number, found %s", describe(n))
			return
		}
		i, err := strconv.ParseInt(strings.ReplaceAll(n.Value, "_", ""), 0, 64)
		if err != nil {
			d.errorf(n, path, "want a whole number, found %s", describe(n))
			return
		}
		v.SetInt(i)
	case reflect.Float64:
		t := n.ShortTag()
		if n.Kind != yaml.ScalarNode || (t != "!!float" && t != "!!int") {
			d.errorf(n, path, "want a number, found %s", describe(n))
			return
		}
		f, err := strconv.ParseFloat(strings.ReplaceAll(n.Value, "_", ""), 64)
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			d.errorf(n, path, "want a finite number, found %s", describe(n))
			return
		}
		v.SetFloat(f)
	default:
		panic("configs: unsupported field type " + v.Type().String()) // programmer error
	}
}

func (d *decoder) decodeStruct(n *yaml.Node, v reflect.Value, path string) {
	if n.Kind != yaml.MappingNode {
		d.errorf(n, path, "want a section of key: value pairs, found %s", describe(n))
		return
	}
	t := v.Type()
	fields := map[string]int{}
	var names []string
	for i := 0; i < t.NumField(); i++ {
		tag := t.Field(i).Tag.Get("yaml")
		if tag == "" || tag == "-" {
			continue
		}
		fields[tag] = i
		names = append(names, tag)
	}
	seen := map[string]bool{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, val := n.Content[i], n.Content[i+1]
		kp := join(path, k.Value)
		fi, ok := fields[k.Value]
		if to, renamed := renamedKeys[kp]; !ok && renamed {
			d.errs = append(d.errs, &Error{File: d.file, Line: k.Line, Column: k.Column, Path: path,
				Msg: fmt.Sprintf("key %q was renamed: write %q", k.Value, to)})
			continue
		}
		if !ok {
			msg := fmt.Sprintf("unknown key %q", k.Value)
			if s := suggest(k.Value, names); s != "" {
				msg += fmt.Sprintf(" (did you mean %q?)", s)
			} else {
				msg += " (known: " + strings.Join(names, ", ") + ")"
			}
			d.errorf(k, kp, "%s", msg)
			continue
		}
		if seen[k.Value] {
			d.errorf(k, kp, "duplicate key %q", k.Value)
			continue
		}
		seen[k.Value] = true
		d.pos[kp] = [2]int{val.Line, val.Column}
		d.decode(val, v.Field(fi), kp)
	}
}

// renamedKeys maps the full path of each key that an earlier release read
// to the name it has now. Parse refuses the old spelling at its place and
// says what to write instead, rather than calling it unknown.
var renamedKeys = map[string]string{
	"sources":  "intake",
	"sinks":    "delivery",
	"data_dir": "state_dir",
}

// suggest returns the known name closest to key when it is a likely typo
// (edit distance ≤ 2), else "".
func suggest(key string, names []string) string {
	best, bestD := "", 3
	for _, n := range names {
		if dd := editDistance(strings.ToLower(key), n); dd < bestD {
			best, bestD = n, dd
		}
	}
	return best
}

// editDistance is the Levenshtein distance (Levenshtein 1966).
func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}

func kindName(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a section (key: value pairs)"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		return "a single value"
	}
	return "something else"
}

func describe(n *yaml.Node) string {
	if n.Kind == yaml.ScalarNode {
		return strconv.Quote(n.Value)
	}
	return kindName(n)
}

// Where returns the file, line and column of the key path (e.g.
// "server.tls.ca") in the file the configuration was loaded from, or of
// its closest ancestor that was written; line 0 when unknown (a Config
// built in code, or a key left to its default).
func (c *Config) Where(path string) (file string, line, col int) {
	if c.pos == nil {
		return c.file, 0, 0
	}
	d := decoder{pos: c.pos}
	if p, ok := d.lookup(path); ok {
		return c.file, p[0], p[1]
	}
	return c.file, 0, 0
}

// CheckFiles reports every file the configuration names that cannot be
// read (model, empirical limits, TLS, credentials, NKey seed), each with
// its place. Validate does not touch the file system; "modewatch check"
// calls both.
func (c *Config) CheckFiles() error {
	var errs Errors
	check := func(path, name string) {
		if name == "" {
			return
		}
		f, err := os.Open(name)
		if err == nil {
			f.Close()
			return
		}
		file, line, col := c.Where(path)
		errs = append(errs, &Error{File: file, Line: line, Column: col, Path: path, Msg: fmt.Sprintf("cannot read %q: %v", name, errors.Unwrap(err))})
	}
	check("server.nkey_seed_file", c.Server.NKeySeedFile)
	check("server.credentials_file", c.Server.CredentialsFile)
	check("server.tls.ca", c.Server.TLS.CA)
	check("server.tls.cert", c.Server.TLS.Cert)
	check("server.tls.key", c.Server.TLS.Key)
	check("model.file", c.Model.File)
	check("http.tls.cert", c.HTTP.TLS.Cert)
	check("http.tls.key", c.HTTP.TLS.Key)
	check("http.tls.client_ca", c.HTTP.TLS.ClientCA)
	if c.HTTP.TokensFile != "" {
		if _, err := ReadTokensFile(c.HTTP.TokensFile); err != nil {
			file, line, col := c.Where("http.tokens_file")
			errs = append(errs, &Error{File: file, Line: line, Column: col, Path: "http.tokens_file", Msg: err.Error()})
		}
	}
	if c.Model.Limits.Method == LimitsEmpirical {
		check("model.limits", c.Model.Limits.File)
	}
	for i, u := range c.Units {
		p := fmt.Sprintf("units[%d].model", i)
		check(p+".file", u.Model.File)
		if u.Model.Limits.Method == LimitsEmpirical {
			check(p+".limits", u.Model.Limits.File)
		}
	}
	for i, f := range c.Intake.Files {
		if f != "-" {
			check(fmt.Sprintf("intake.files[%d]", i), f)
		}
	}
	if len(errs) == 0 {
		return nil
	}
	sortErrors(errs)
	return errs
}
