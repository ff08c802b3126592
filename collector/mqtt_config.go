package collector

import (
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"maps"
	"net/url"
	"os"
	"slices"
	"strings"
	"time"

	"github.com/prometheus/common/model"
)

// Kinds of data an MQTT topic carries.
const (
	MQTTReadings    = "readings"    // particle-count readings
	MQTTPressure    = "pressure"    // DP samples
	MQTTEnvironment = "environment" // temperature, humidity, airflow velocity
)

// Defaults of the MQTT section.
const (
	DefaultMQTTKeepAlive      = 30 * time.Second
	DefaultMQTTConnectTimeout = 10 * time.Second
	DefaultMQTTMinBackoff     = time.Second
	DefaultMQTTMaxBackoff     = time.Minute
	// DefaultMQTTMaxPayload bounds one message, as MaxBodyBytes bounds
	// one request.
	DefaultMQTTMaxPayload = 1 << 20
)

// MQTTConfig is the MQTT source (yaml section "mqtt" of the site
// configuration): the broker to subscribe at and what each topic carries.
//
//	mqtt:
//	  broker: ssl://broker.veldmark.example:8883
//	  client_id: cleanmon-building-c   # fixed: the broker keeps the session under it
//	  username: cleanmon
//	  password_file: /etc/cleanmon/mqtt-password
//	  tls: {ca_file: /etc/cleanmon/mqtt-ca.pem}
//	  topics:
//	    - topic: building-c/readings/#   # our own JSON, as POST /api/v1/readings
//	      kind: readings
//	    - topic: building-c/hood/velocity
//	      sensor: av-hood                # a flat payload of one instrument
//	      fields: {velocity_m_s: v, time: ts}
//
// Messages are taken at QoS 1 in a persistent session, and acknowledged
// to the broker only once stored: a daemon that dies before the commit
// gets the message again. Publishers must publish at QoS 1 too: a broker
// delivers at the lower of the publisher's and the subscriber's level, and
// a QoS 0 message is gone once sent.
type MQTTConfig struct {
	// Broker is the broker's URL: tcp://host:1883, or ssl://host:8883
	// (also tls://, mqtts://) for TLS; ws:// and wss:// work too.
	Broker string `yaml:"broker"`
	// ClientID names the session at the broker; required and fixed, since
	// unacknowledged messages wait under it while the daemon is away.
	ClientID string `yaml:"client_id"`
	// Username and PasswordFile (a file holding the password, trailing
	// newline ignored) log in; both or neither.
	Username     string `yaml:"username"`
	PasswordFile string `yaml:"password_file"`
	// TLS sets up certificates for ssl:// brokers.
	TLS *MQTTTLS `yaml:"tls"`
	// QoS is 1, the only level accepted: 0 may lose messages, and 2 adds
	// nothing since duplicates are dropped by the store. Default 1.
	QoS *int `yaml:"qos"`
	// KeepAlive, default 30s; ConnectTimeout, default 10s.
	KeepAlive      model.Duration `yaml:"keep_alive"`
	ConnectTimeout model.Duration `yaml:"connect_timeout"`
	// MaxBackoff bounds the wait between reconnection attempts (which
	// doubles from 1 s), default 1m.
	MaxBackoff model.Duration `yaml:"max_backoff"`
	// Topics says what each subscription carries; at least one.
	Topics []MQTTTopic `yaml:"topics"`
}

// MQTTTLS are the certificates of a TLS connection to the broker.
type MQTTTLS struct {
	CAFile     string `yaml:"ca_file"`     // PEM bundle to trust; default the system's
	CertFile   string `yaml:"cert_file"`   // client certificate, with key_file
	KeyFile    string `yaml:"key_file"`    //
	ServerName string `yaml:"server_name"` // when it differs from the broker's host
}

// MQTTTopic is one subscription.
//
// Without fields, payloads are our own JSON: an object or an array of
// objects with the fields of the HTTP API for the kind; each object names
// its counter or sensor, or the topic does (counter/sensor), in which case
// an object naming another is refused.
//
// With fields, payloads are flat JSON objects of one instrument, which
// the topic must name: fields maps each channel ("time", "volume_l",
// "flow_lpm", "sample_s", "status", "mode" and the sizes "0.5", ... of a
// counter; "time", "pa" of a DP sensor; "time", "temperature_c",
// "humidity_pct", "velocity_m_s" of an environment sensor) to the name of
// the payload's field; a channel not listed is read from the field of its
// own name. Other payload fields are ignored. A time may also be a number
// of Unix seconds.
type MQTTTopic struct {
	// Topic is the filter subscribed to; + and # wildcards allowed.
	Topic string `yaml:"topic"`
	// Kind is readings, pressure or environment; implied by counter or
	// sensor.
	Kind string `yaml:"kind"`
	// Counter or Sensor names the one instrument the topic carries.
	Counter string `yaml:"counter"`
	Sensor  string `yaml:"sensor"`
	// Fields maps channels to payload field names, for flat payloads.
	Fields map[string]string `yaml:"fields"`
}

// mqttTopic is a topic resolved against the registry.
type mqttTopic struct {
	MQTTTopic
	kind string // resolved
	id   string // Counter or Sensor
}

// ValidateMQTT checks the mqtt section and returns every problem, each
// naming its path ("mqtt.topics[1].fields.0.5"). With reg, the counters and
// sensors the topics name must exist in it (reg == nil skips that check).
// Files (password, certificates) are not read here: see NewMQTTSource.
func ValidateMQTT(c *MQTTConfig, reg *Registry) []FieldError {
	var errs []FieldError
	add := func(path, format string, args ...any) {
		errs = append(errs, FieldError{Path: path, Msg: fmt.Sprintf(format, args...)})
	}
	const p = "mqtt"
	if c.Broker == "" {
		add(p+".broker", "missing: give the broker's URL, e.g. ssl://broker.example:8883")
	} else if u, err := url.Parse(c.Broker); err != nil || u.Host == "" {
		add(p+".broker", "%q is not a URL such as tcp://host:1883 or ssl://host:8883", c.Broker)
	} else if !slices.Contains([]string{"tcp", "mqtt", "ssl", "tls", "mqtts", "ws", "wss"}, u.Scheme) {
		add(p+".broker", "unknown scheme %q (tcp, ssl, tls, mqtt, mqtts, ws, wss)", u.Scheme)
	} else if c.TLS != nil && !slices.Contains([]string{"ssl", "tls", "mqtts", "wss"}, u.Scheme) {
		add(p+".tls", "given, but the broker URL %q does not use TLS (ssl://host:8883)", c.Broker)
	}
	if c.ClientID == "" {
		add(p+".client_id", "missing: a fixed client id keeps the session (and the unacknowledged messages) at the broker")
	} else if msg := checkID(c.ClientID); msg != "" {
		add(p+".client_id", "%s", msg)
	}
	if (c.Username == "") != (c.PasswordFile == "") {
		add(p+".password_file", "username and password_file go together")
	}
	if c.TLS != nil && (c.TLS.CertFile == "") != (c.TLS.KeyFile == "") {
		add(p+".tls.key_file", "cert_file and key_file go together")
	}
	if c.QoS != nil && *c.QoS != 1 {
		add(p+".qos", "%d: only QoS 1 is accepted (0 may lose messages; duplicates are dropped, so 2 adds nothing)", *c.QoS)
	}
	for _, d := range []struct {
		name string
		d    model.Duration
	}{{"keep_alive", c.KeepAlive}, {"connect_timeout", c.ConnectTimeout}, {"max_backoff", c.MaxBackoff}} {
		if d.d < 0 {
			add(p+"."+d.name, "must not be negative")
		}
	}
	if len(c.Topics) == 0 {
		add(p+".topics", "missing: list the topics to subscribe to and what each carries")
	}
	seen := map[string]int{}
	for i, t := range c.Topics {
		tp := fmt.Sprintf("%s.topics[%d]", p, i)
		if j, dup := seen[t.Topic]; dup {
			add(tp+".topic", "%q is already subscribed by topics[%d]", t.Topic, j)
		}
		seen[t.Topic] = i
		resolveTopic(tp, t, reg, add)
	}
	return errs
}

// checkTopicFilter returns why f is not a valid MQTT topic filter, or "".
func checkTopicFilter(f string) string {
	if f == "" {
		return "missing"
	}
	levels := strings.Split(f, "/")
	for i, l := range levels {
		switch {
		case l == "#" && i != len(levels)-1:
			return fmt.Sprintf("%q: # must be the last level", f)
		case l != "#" && l != "+" && strings.ContainsAny(l, "#+"):
			return fmt.Sprintf("%q: + and # must each fill a whole level", f)
		}
	}
	return ""
}

// resolveTopic checks one topic and resolves its kind and instrument.
func resolveTopic(tp string, t MQTTTopic, reg *Registry, add func(string, string, ...any)) mqttTopic {
	out := mqttTopic{MQTTTopic: t, kind: t.Kind}
	if msg := checkTopicFilter(t.Topic); msg != "" {
		add(tp+".topic", "%s", msg)
	}
	switch {
	case t.Counter != "" && t.Sensor != "":
		add(tp+".sensor", "give counter or sensor, not both")
	case t.Counter != "":
		out.id, out.kind = t.Counter, MQTTReadings
		if reg != nil {
			if _, ok := reg.Counter(t.Counter); !ok {
				add(tp+".counter", "unknown counter %q", t.Counter)
			}
		}
	case t.Sensor != "":
		out.id, out.kind = t.Sensor, ""
		if reg != nil {
			if _, ok := reg.Sensor(t.Sensor); ok {
				out.kind = MQTTPressure
			} else if _, ok := reg.EnvironmentSensor(t.Sensor); ok {
				out.kind = MQTTEnvironment
			} else {
				add(tp+".sensor", "unknown sensor %q (neither a DP nor an environment sensor)", t.Sensor)
			}
		} else {
			out.kind = t.Kind
		}
	}
	switch t.Kind {
	case "":
		if out.id == "" {
			add(tp+".kind", "missing: say what the topic carries (%s, %s or %s), or name its counter or sensor", MQTTReadings, MQTTPressure, MQTTEnvironment)
		}
	case MQTTReadings, MQTTPressure, MQTTEnvironment:
		if out.kind != "" && out.kind != t.Kind {
			add(tp+".kind", "%s, but %s %q carries %s", t.Kind, map[bool]string{true: "counter", false: "sensor"}[t.Counter != ""], out.id, out.kind)
		}
	default:
		add(tp+".kind", "unknown kind %q (%s, %s or %s)", t.Kind, MQTTReadings, MQTTPressure, MQTTEnvironment)
	}
	if len(t.Fields) > 0 {
		checkFlatFields(tp, out, reg, add)
	}
	return out
}

// checkFlatFields checks the field mapping of a flat-payload topic.
func checkFlatFields(tp string, t mqttTopic, reg *Registry, add func(string, string, ...any)) {
	if t.id == "" {
		add(tp+".fields", "a flat payload does not say whose it is: name the topic's counter or sensor")
		return
	}
	valid := flatChannels(t.kind, t.id, reg)
	from := map[string]string{}
	for _, ch := range slices.Sorted(maps.Keys(t.Fields)) {
		f := t.Fields[ch]
		switch {
		case valid != nil && !valid[ch]:
			add(tp+".fields."+ch, "not a channel of %s %s (%s)", t.kind, t.id, strings.Join(slices.Sorted(maps.Keys(valid)), ", "))
		case f == "":
			add(tp+".fields."+ch, "empty: give the name of the payload field")
		case from[f] != "":
			add(tp+".fields."+ch, "payload field %q is already read as %s", f, from[f])
		default:
			from[f] = ch
		}
	}
}

// flatChannels lists the channels a flat payload of the instrument may
// map, or nil when the registry is not at hand.
func flatChannels(kind, id string, reg *Registry) map[string]bool {
	if reg == nil {
		return nil
	}
	out := map[string]bool{"time": true}
	switch kind {
	case MQTTReadings:
		ci, ok := reg.Counter(id)
		if !ok {
			return nil
		}
		for _, k := range []string{"volume_l", "flow_lpm", "sample_s", "status", "mode"} {
			out[k] = true
		}
		for _, k := range ci.Keys {
			out[k] = true
		}
	case MQTTPressure:
		out["pa"] = true
	case MQTTEnvironment:
		ei, ok := reg.EnvironmentSensor(id)
		if !ok {
			return nil
		}
		for _, ch := range ei.Channels() {
			out[ch] = true
		}
	}
	return out
}

// tlsConfig reads the certificates of the TLS section.
func (c *MQTTConfig) tlsConfig() (*tls.Config, error) {
	cfg := &tls.Config{MinVersion: tls.VersionTLS12}
	if c.TLS == nil {
		return cfg, nil
	}
	cfg.ServerName = c.TLS.ServerName
	if c.TLS.CAFile != "" {
		pem, err := os.ReadFile(c.TLS.CAFile)
		if err != nil {
			return nil, fmt.Errorf("mqtt.tls.ca_file: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("mqtt.tls.ca_file: %s holds no PEM certificate", c.TLS.CAFile)
		}
		cfg.RootCAs = pool
	}
	if c.TLS.CertFile != "" {
		kp, err := tls.LoadX509KeyPair(c.TLS.CertFile, c.TLS.KeyFile)
		if err != nil {
			return nil, fmt.Errorf("mqtt.tls.cert_file: %w", err)
		}
		cfg.Certificates = []tls.Certificate{kp}
	}
	return cfg, nil
}

// password reads the password file.
func (c *MQTTConfig) password() (string, error) {
	if c.PasswordFile == "" {
		return "", nil
	}
	b, err := os.ReadFile(c.PasswordFile)
	if err != nil {
		return "", fmt.Errorf("mqtt.password_file: %w", err)
	}
	pw := strings.TrimRight(string(b), "\r\n")
	if pw == "" {
		return "", fmt.Errorf("mqtt.password_file: %s is empty", c.PasswordFile)
	}
	return pw, nil
}

// topicMatches tells whether topic matches the filter (MQTT 3.1.1 §4.7):
// + is one level, # the rest (including none); topics starting with $ are
// matched by no wildcard at the first level.
func topicMatches(filter, topic string) bool {
	if strings.HasPrefix(topic, "$") && (strings.HasPrefix(filter, "+") || strings.HasPrefix(filter, "#")) {
		return false
	}
	fl, tl := strings.Split(filter, "/"), strings.Split(topic, "/")
	for i, f := range fl {
		switch {
		case f == "#":
			return true
		case i >= len(tl):
			return false
		case f != "+" && f != tl[i]:
			return false
		}
	}
	return len(fl) == len(tl)
}
