package site

import (
	"crypto/sha256"
	"crypto/tls"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"net"
	"os"
	"reflect"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/prometheus/common/model"
	"go.yaml.in/yaml/v3"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/collector"
)

// defaultRetention keeps ten years of readings, the span audits of a
// production line usually reach back (common practice, no source).
const defaultRetention = 87600 * time.Hour

// maxConfigBytes bounds what is read as a configuration file.
const maxConfigBytes = 8 << 20

// ErrInvalid marks a configuration that cannot be used.
var ErrInvalid = errors.New("invalid configuration")

// Config is the site configuration file. Each package owns its section;
// this file only composes them and checks what crosses sections.
type Config struct {
	Site            string              `yaml:"site"`
	Listen          string              `yaml:"listen"`
	DataDir         string              `yaml:"data_dir"`
	Retention       model.Duration      `yaml:"retention"`
	Access          access.Config       `yaml:"access"`
	Zones           []alerts.ZoneConfig `yaml:"zones"`
	Counters        []collector.Counter `yaml:"counters"`
	PressureSensors []collector.Sensor  `yaml:"pressure_sensors"`
	// Environment are the temperature, humidity and airflow-velocity
	// sensors; MQTT the broker they, and counters or DP sensors, may
	// publish to (environment.go).
	Environment   []collector.EnvironmentSensorConfig `yaml:"environment"`
	MQTT          *collector.MQTTConfig               `yaml:"mqtt"`
	Alarms        alerts.AlarmsConfig                 `yaml:"alarms"`
	Notifications alerts.NotifyConfig                 `yaml:"notifications"`
	TLS           access.TLSConfig                    `yaml:"tls"`
	Queries       QueriesConfig                       `yaml:"queries"`
	// AllowPlainHTTP permits serving without TLS on an address other than
	// loopback (a closed instrument network behind its own protection).
	AllowPlainHTTP bool `yaml:"allow_plain_http"`
	// Audit and Ingest: the signed record and the ingest bounds (trust.go).
	Audit  AuditConfig  `yaml:"audit"`
	Ingest IngestConfig `yaml:"ingest"`
	// TimeZone is the site's IANA time zone (UTC when empty): the pages
	// show times and cut shifts in it. Shifts are the start times of the
	// site's shifts ("06:00"), each running until the next.
	TimeZone string   `yaml:"time_zone"`
	Shifts   []string `yaml:"shifts"`
	// Reports are the files the daemon writes by itself.
	Reports Reports `yaml:"reports"`
	// Accounts are the rules for people who sign in on the pages; OIDC
	// the site's identity provider, if any.
	Accounts access.AccountsConfig `yaml:"accounts"`
	OIDC     access.OIDCConfig     `yaml:"oidc"`
	// SignaturesRequired refuses acknowledgements and operating-state
	// changes made with an API token: only a person's signature makes them.
	SignaturesRequired bool `yaml:"signatures_required"`

	// source and digest name the file the configuration was read from and
	// the SHA-256 of its bytes, for the audit trail.
	source, digest string
}

// Reports configures the reports the daemon writes by itself.
type Reports struct {
	// TrendDir, when set, receives each zone's month on one page (HTML and
	// PDF) on the first day of the next month, and at start for the last
	// month when its files are missing.
	TrendDir string `yaml:"trend_dir"`
}

// Source is the file the configuration was read from.
func (c *Config) Source() string { return c.source }

// Digest is the SHA-256 (hex) of the configuration's bytes.
func (c *Config) Digest() string { return c.digest }

// RetentionOrDefault is the configured retention or its default.
func (c *Config) RetentionOrDefault() time.Duration {
	if c.Retention > 0 {
		return time.Duration(c.Retention)
	}
	return defaultRetention
}

// Bindings places each counter at its zone and location.
func (c *Config) Bindings() []alerts.Binding {
	out := make([]alerts.Binding, 0, len(c.Counters))
	for _, k := range c.Counters {
		out = append(out, alerts.Binding{Counter: k.ID, Zone: k.Zone, Location: CounterLocation(k)})
	}
	return out
}

// CounterLocation is the sampling location of a counter: the collector
// lets it default to the counter's id.
func CounterLocation(k collector.Counter) string {
	if k.Location == "" {
		return k.ID
	}
	return k.Location
}

// Zone returns the configuration of one zone.
func (c *Config) Zone(id string) (*alerts.ZoneConfig, bool) {
	for i := range c.Zones {
		if c.Zones[i].ID == id {
			return &c.Zones[i], true
		}
	}
	return nil, false
}

// Problem is one problem of a configuration file, with where it is.
type Problem struct {
	File      string
	Line, Col int
	Path      string
	Msg       string
}

// String is file:line:col: path: message, the form editors jump to.
func (p Problem) String() string {
	if p.Path == "" {
		return fmt.Sprintf("%s:%d:%d: %s", p.File, p.Line, p.Col, p.Msg)
	}
	return fmt.Sprintf("%s:%d:%d: %s: %s", p.File, p.Line, p.Col, p.Path, p.Msg)
}

// Error holds every problem found in a configuration file.
type Error struct{ Problems []Problem }

// Error is every problem, one a line.
func (e *Error) Error() string {
	lines := make([]string, len(e.Problems))
	for i, p := range e.Problems {
		lines[i] = p.String()
	}
	return strings.Join(lines, "\n")
}

// Unwrap makes every configuration error an ErrInvalid.
func (e *Error) Unwrap() error { return ErrInvalid }

// LoadFile reads and checks a configuration file.
func LoadFile(path string) (*Config, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("%w: %v", ErrInvalid, err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxConfigBytes+1))
	if err != nil {
		return nil, fmt.Errorf("%w: %s: %v", ErrInvalid, path, err)
	}
	if len(data) > maxConfigBytes {
		return nil, fmt.Errorf("%w: %s: larger than %d bytes", ErrInvalid, path, maxConfigBytes)
	}
	return Load(path, data)
}

// configDigest is the SHA-256 of a configuration's bytes, hex.
func configDigest(data []byte) string {
	sum := sha256.Sum256(data)
	return hex.EncodeToString(sum[:])
}

// Load parses and checks a configuration. The YAML is read into a
// node tree first and decoded field by field, so that every problem, an
// unknown key as much as a wrong value or a failed cross-check, is reported
// at its line and column and all of them at once.
func Load(name string, data []byte) (*Config, error) {
	d := &nodeDecoder{file: name, nodes: map[string]*yaml.Node{}}
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		line, msg := yamlSyntaxError(err)
		return nil, &Error{[]Problem{{File: name, Line: line, Col: 1, Msg: msg}}}
	}
	cfg := &Config{}
	if len(root.Content) == 0 {
		return nil, &Error{[]Problem{{File: name, Line: 1, Col: 1, Msg: "empty configuration"}}}
	}
	d.root = root.Content[0]
	d.decode(d.root, reflect.ValueOf(cfg).Elem(), "")
	// The checks run even after decoding problems, so that one pass shows
	// everything; a check's complaint about a field that failed to decode
	// would only repeat it, so those are dropped.
	decoded := d.problems
	d.problems = nil
	d.check(cfg)
	checked := d.problems
	d.problems = decoded
	for _, p := range checked {
		if !coveredBy(p.Path, decoded) {
			d.problems = append(d.problems, p)
		}
	}
	if len(d.problems) > 0 {
		sort.SliceStable(d.problems, func(i, j int) bool {
			a, b := d.problems[i], d.problems[j]
			if a.Line != b.Line {
				return a.Line < b.Line
			}
			return a.Col < b.Col
		})
		return nil, &Error{d.problems}
	}
	cfg.source, cfg.digest = name, configDigest(data)
	return cfg, nil
}

// coveredBy reports whether path is, or lies under, the path of one of ps.
func coveredBy(path string, ps []Problem) bool {
	for _, p := range ps {
		if path == p.Path || strings.HasPrefix(path, p.Path+".") || strings.HasPrefix(path, p.Path+"[") {
			return true
		}
	}
	return false
}

// yamlSyntaxError pulls the line out of a parser message ("yaml: line 7:
// did not find expected key").
func yamlSyntaxError(err error) (int, string) {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	if rest, ok := strings.CutPrefix(msg, "line "); ok {
		if i := strings.Index(rest, ":"); i > 0 {
			if n, err := strconv.Atoi(rest[:i]); err == nil {
				return n, strings.TrimSpace(rest[i+1:])
			}
		}
	}
	return 1, msg
}

// nodeDecoder decodes a YAML node tree into Go values by reflection,
// remembering the node of every path for later messages.
type nodeDecoder struct {
	file     string
	root     *yaml.Node
	nodes    map[string]*yaml.Node
	problems []Problem
}

var (
	unmarshalerType = reflect.TypeFor[yaml.Unmarshaler]()
	durationType    = reflect.TypeFor[model.Duration]()
)

func (d *nodeDecoder) addAt(n *yaml.Node, path, format string, a ...any) {
	d.problems = append(d.problems, Problem{File: d.file, Line: n.Line, Col: n.Column, Path: path, Msg: fmt.Sprintf(format, a...)})
}

// add reports a problem at the node of path, or of its nearest parent
// when the path itself is absent (a missing key).
func (d *nodeDecoder) add(path, format string, a ...any) {
	d.addAt(d.nodeOf(path), path, format, a...)
}

func (d *nodeDecoder) nodeOf(path string) *yaml.Node {
	for p := path; p != ""; p = parentPath(p) {
		if n, ok := d.nodes[p]; ok {
			return n
		}
	}
	return d.root
}

// parentPath strips the last ".key" or "[i]" of a path. Map keys may hold
// dots ("levels.0.5"), so the longest known prefix wins in nodeOf anyway.
func parentPath(p string) string {
	if strings.HasSuffix(p, "]") {
		if i := strings.LastIndex(p, "["); i >= 0 {
			return p[:i]
		}
	}
	if i := strings.LastIndex(p, "."); i >= 0 {
		return p[:i]
	}
	return ""
}

func joinPath(parent, key string) string {
	if parent == "" {
		return key
	}
	return parent + "." + key
}

func isNull(n *yaml.Node) bool {
	return n.Kind == yaml.ScalarNode && n.ShortTag() == "!!null"
}

func (d *nodeDecoder) decode(n *yaml.Node, v reflect.Value, path string) {
	for n.Kind == yaml.AliasNode && n.Alias != nil {
		n = n.Alias
	}
	if _, seen := d.nodes[path]; !seen || path == "" {
		d.nodes[path] = n
	}
	if v.Type() == durationType {
		d.decodeDuration(n, v, path)
		return
	}
	if v.CanAddr() && v.Addr().Type().Implements(unmarshalerType) {
		if isNull(n) {
			return
		}
		if err := n.Decode(v.Addr().Interface()); err != nil {
			d.addAt(n, path, "%s", cleanYAMLError(err))
		}
		return
	}
	switch v.Kind() {
	case reflect.Pointer:
		if isNull(n) {
			v.SetZero()
			return
		}
		p := reflect.New(v.Type().Elem())
		d.decode(n, p.Elem(), path)
		v.Set(p)
	case reflect.Struct:
		d.decodeStruct(n, v, path)
	case reflect.Slice:
		if isNull(n) {
			return
		}
		if n.Kind != yaml.SequenceNode {
			d.addAt(n, path, "want a list")
			return
		}
		s := reflect.MakeSlice(v.Type(), len(n.Content), len(n.Content))
		for i, item := range n.Content {
			d.decode(item, s.Index(i), fmt.Sprintf("%s[%d]", path, i))
		}
		v.Set(s)
	case reflect.Map:
		if isNull(n) {
			return
		}
		if n.Kind != yaml.MappingNode {
			d.addAt(n, path, "want a mapping of key: value")
			return
		}
		m := reflect.MakeMapWithSize(v.Type(), len(n.Content)/2)
		seen := map[string]*yaml.Node{}
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, val := n.Content[i], n.Content[i+1]
			key := k.Value
			if first, dup := seen[key]; dup {
				d.addAt(k, joinPath(path, key), "key given twice (first at line %d)", first.Line)
				continue
			}
			seen[key] = k
			ev := reflect.New(v.Type().Elem()).Elem()
			d.decode(val, ev, joinPath(path, key))
			kv := reflect.New(v.Type().Key()).Elem()
			if kv.Kind() != reflect.String {
				d.addAt(k, path, "unsupported key type")
				continue
			}
			kv.SetString(key)
			m.SetMapIndex(kv, ev)
		}
		v.Set(m)
	default:
		d.decodeScalar(n, v, path)
	}
}

func (d *nodeDecoder) decodeStruct(n *yaml.Node, v reflect.Value, path string) {
	if isNull(n) {
		return
	}
	if n.Kind != yaml.MappingNode {
		d.addAt(n, path, "want a mapping of key: value")
		return
	}
	fields := map[string]int{}
	var names []string
	t := v.Type()
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		if !f.IsExported() {
			continue
		}
		name, _, _ := strings.Cut(f.Tag.Get("yaml"), ",")
		if name == "-" {
			continue
		}
		if name == "" {
			name = strings.ToLower(f.Name)
		}
		fields[name] = i
		names = append(names, name)
	}
	seen := map[string]*yaml.Node{}
	for _, pair := range mappingPairs(n) {
		k, val := pair[0], pair[1]
		key := k.Value
		fp := joinPath(path, key)
		i, ok := fields[key]
		if !ok {
			d.addAt(k, fp, "unknown key (known here: %s)", strings.Join(names, ", "))
			continue
		}
		if first, dup := seen[key]; dup {
			d.addAt(k, fp, "key given twice (first at line %d)", first.Line)
			continue
		}
		seen[key] = k
		d.decode(val, v.Field(i), fp)
	}
}

// mappingPairs lists a mapping's key/value pairs, expanding YAML merge
// keys ("<<: *defaults") so that shared blocks are checked like the rest.
func mappingPairs(n *yaml.Node) [][2]*yaml.Node {
	var out [][2]*yaml.Node
	var merged [][2]*yaml.Node
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, val := n.Content[i], n.Content[i+1]
		if k.Value == "<<" && k.ShortTag() == "!!merge" {
			srcs := []*yaml.Node{val}
			if val.Kind == yaml.SequenceNode {
				srcs = val.Content
			}
			for _, s := range srcs {
				for s.Kind == yaml.AliasNode && s.Alias != nil {
					s = s.Alias
				}
				if s.Kind == yaml.MappingNode {
					merged = append(merged, mappingPairs(s)...)
				}
			}
			continue
		}
		out = append(out, [2]*yaml.Node{k, val})
	}
	// Explicit keys win over merged ones.
	have := map[string]bool{}
	for _, p := range out {
		have[p[0].Value] = true
	}
	for _, p := range merged {
		if !have[p[0].Value] {
			out = append(out, p)
			have[p[0].Value] = true
		}
	}
	return out
}

func (d *nodeDecoder) decodeScalar(n *yaml.Node, v reflect.Value, path string) {
	if n.Kind != yaml.ScalarNode {
		d.addAt(n, path, "want a single value, not a %s", kindName(n.Kind))
		return
	}
	if isNull(n) {
		v.SetZero()
		return
	}
	if err := n.Decode(v.Addr().Interface()); err != nil {
		switch v.Kind() {
		case reflect.Bool:
			d.addAt(n, path, "want true or false, got %q", n.Value)
		case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
			reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
			d.addAt(n, path, "want a whole number, got %q", n.Value)
		case reflect.Float32, reflect.Float64:
			d.addAt(n, path, "want a number, got %q", n.Value)
		default:
			d.addAt(n, path, "%s", cleanYAMLError(err))
		}
	}
}

func kindName(k yaml.Kind) string {
	switch k {
	case yaml.SequenceNode:
		return "list"
	case yaml.MappingNode:
		return "mapping"
	}
	return "value"
}

// cleanYAMLError drops the "yaml: unmarshal errors: line N:" framing, the
// position being reported separately.
func cleanYAMLError(err error) string {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	var te *yaml.TypeError
	if errors.As(err, &te) && len(te.Errors) > 0 {
		msg = te.Errors[0]
	}
	if strings.HasPrefix(msg, "line ") {
		if i := strings.Index(msg, ": "); i > 0 {
			msg = msg[i+2:]
		}
	}
	return msg
}

// check runs the checks of every section and those across sections.
func (d *nodeDecoder) check(c *Config) {
	if c.Listen != "" {
		if _, port, err := net.SplitHostPort(c.Listen); err != nil {
			d.add("listen", "%q is not host:port (e.g. 127.0.0.1:8080): %v", c.Listen, err)
		} else if p, err := strconv.Atoi(port); err != nil || p < 0 || p > 65535 {
			d.add("listen", "%q: port must be a number 0–65535", c.Listen)
		}
	}
	if c.TLS.Enabled() {
		switch {
		case c.TLS.CertFile == "":
			d.add("tls.cert_file", "missing: key_file is given, the certificate is not")
		case c.TLS.KeyFile == "":
			d.add("tls.key_file", "missing: cert_file is given, the key is not")
		default:
			if _, err := tls.LoadX509KeyPair(c.TLS.CertFile, c.TLS.KeyFile); err != nil {
				d.add("tls.cert_file", "%v", err)
			}
		}
	}
	if c.Listen != "" && !c.TLS.Enabled() && !c.AllowPlainHTTP && !IsLoopback(c.Listen) {
		d.add("listen", "%q is not a loopback address and no tls is configured: give tls.cert_file and tls.key_file, or set allow_plain_http: true for a closed network", c.Listen)
	}
	if c.Retention < 0 {
		d.add("retention", "%s: must be positive", time.Duration(c.Retention))
	}

	d.checkQueries(c.Queries)
	d.checkClock(c)
	d.checkTokens(c.Access.Tokens)
	d.checkPeople(c.Accounts, c.OIDC)
	d.checkSections(c)
	d.checkAcross(c)
	d.checkTrust(c)
	d.checkInstruments(c)
}

// checkTokens checks the access tokens: names and secrets unique, roles
// known.
func (d *nodeDecoder) checkTokens(tokens []access.TokenConfig) {
	seenTok := map[string]int{}
	seenHash := map[string]int{}
	for i, t := range tokens {
		p := fmt.Sprintf("access.tokens[%d]", i)
		if strings.TrimSpace(t.Name) == "" {
			d.add(p+".name", "missing: a token needs a name (it appears in the audit trail)")
		} else if j, dup := seenTok[t.Name]; dup {
			d.add(p+".name", "token name %q already used at access.tokens[%d]", t.Name, j)
		} else {
			seenTok[t.Name] = i
		}
		h := strings.ToLower(strings.TrimSpace(t.SHA256))
		if b, err := hex.DecodeString(h); err != nil || len(b) != 32 {
			d.add(p+".sha256", "want the SHA-256 of the secret as 64 hex digits (e.g. printf %%s SECRET | sha256sum)")
		} else if j, dup := seenHash[h]; dup {
			d.add(p+".sha256", "same secret as access.tokens[%d]: each token needs its own", j)
		} else {
			seenHash[h] = i
		}
		switch t.Role {
		case access.RoleIngest, access.RoleViewer, access.RoleOperator, access.RoleAdmin:
		case "":
			d.add(p+".role", "missing: ingest, viewer, operator or admin")
		default:
			d.add(p+".role", "%q: want ingest, viewer, operator or admin", t.Role)
		}
	}

}

// checkSections runs the checks each package owns for its own section.
func (d *nodeDecoder) checkSections(c *Config) {
	for _, e := range alerts.ValidateZones(c.Zones) {
		d.add(e.Path, "%s", e.Msg)
	}
	for _, e := range alerts.ValidateAlarms(c.Alarms) {
		d.add(e.Path, "%s", e.Msg)
	}
	for _, e := range alerts.ValidateNotify(c.Notifications) {
		d.add(e.Path, "%s", e.Msg)
	}
	zoneIDs := map[string]bool{}
	for _, z := range c.Zones {
		if z.ID != "" {
			zoneIDs[z.ID] = true
		}
	}
	for _, e := range collector.ValidateCounters(c.Counters, zoneIDs) {
		d.add(e.Path, "%s", e.Msg)
	}
	for _, e := range collector.ValidateSensors(c.PressureSensors, zoneIDs) {
		p := e.Path
		if !strings.HasPrefix(p, "pressure_sensors") {
			// The collector names its list on its own terms.
			if _, rest, ok := strings.Cut(p, "["); ok {
				p = "pressure_sensors[" + rest
			}
		}
		d.add(p, "%s", e.Msg)
	}
	d.checkEnvironment(c, zoneIDs)
}

// checkAcross checks what crosses sections: every counter sits at a
// location of its zone and measures the zone's sizes; every location has
// a counter, or the zone could never be shown in class; the retention
// covers every rolling window.
func (d *nodeDecoder) checkAcross(c *Config) {
	// Across sections: every counter sits at a location of its zone and
	// measures the zone's sizes; every location has a counter, or the zone
	// could never be shown in class.
	covered := map[string]bool{}
	for i, k := range c.Counters {
		z, ok := c.Zone(k.Zone)
		if !ok {
			continue // reported by the collector's checks
		}
		p := fmt.Sprintf("counters[%d]", i)
		loc := CounterLocation(k)
		found := false
		for _, l := range z.Locations {
			if l.ID == loc {
				found = true
			}
		}
		if !found {
			var ids []string
			for _, l := range z.Locations {
				ids = append(ids, l.ID)
			}
			d.add(p+".location", "%q is not a location of zone %q (its locations: %s)", loc, k.Zone, strings.Join(ids, ", "))
			continue
		}
		covered[k.Zone+"\x00"+loc] = true
		have := map[float64]bool{}
		for _, s := range k.Sizes {
			if v, err := classify.ParseSize(s); err == nil {
				have[v] = true
			}
		}
		for _, s := range z.Sizes {
			if v, err := classify.ParseSize(s); err == nil && !have[v] {
				d.add(p+".sizes", "counter has no %s µm channel, a size zone %q is judged at", classify.FormatSize(v), z.ID)
			}
		}
	}
	for i, z := range c.Zones {
		for j, l := range z.Locations {
			if l.ID != "" && !covered[z.ID+"\x00"+l.ID] {
				d.add(fmt.Sprintf("zones[%d].locations[%d].id", i, j), "no counter samples location %q: the zone could never be shown in class", l.ID)
			}
		}
	}

	window := time.Duration(0)
	for _, z := range c.Zones {
		if w := time.Duration(z.Window); w > window {
			window = w
		}
	}
	if c.Retention > 0 && time.Duration(c.Retention) < max(window, alerts.DefaultWindow) {
		d.add("retention", "%s is shorter than a zone's rolling window", time.Duration(c.Retention))
	}
}

// IsLoopback tells whether a listen address stays on this machine. An
// empty host means every interface, which is not.
func IsLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// PrintError writes each problem of err on its own line; a file that
// could not be read at all gets one line with the command's name.
func PrintError(w io.Writer, cmd string, err error) {
	var ce *Error
	if errors.As(err, &ce) {
		for _, p := range ce.Problems {
			fmt.Fprintln(w, p.String())
		}
		return
	}
	fmt.Fprintf(w, "%s: %v\n", cmd, err)
}

// Sensor returns the configuration of one DP sensor.
func (c *Config) Sensor(id string) (*collector.Sensor, bool) {
	for i := range c.PressureSensors {
		if c.PressureSensors[i].ID == id {
			return &c.PressureSensors[i], true
		}
	}
	return nil, false
}

// decodeDuration reads every duration of the configuration, of whichever
// package's section: the one place the configuration's duration syntax
// (model.Duration: "90s", "10m", "1h", "30d", "1y", "1h30m") is read. A
// bare number is refused, since its unit would be a guess.
func (d *nodeDecoder) decodeDuration(n *yaml.Node, v reflect.Value, path string) {
	if isNull(n) {
		return
	}
	if n.Kind != yaml.ScalarNode {
		d.addAt(n, path, "want a duration such as \"30s\", \"10m\", \"1h\" or \"30d\", not a %s", kindName(n.Kind))
		return
	}
	dur, err := model.ParseDuration(strings.TrimSpace(n.Value))
	if err != nil {
		d.addAt(n, path, "%q is not a duration such as \"30s\", \"10m\", \"1h\" or \"30d\"", n.Value)
		return
	}
	v.Set(reflect.ValueOf(dur))
}
