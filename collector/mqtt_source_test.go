package collector

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	mqtt "github.com/eclipse/paho.mqtt.golang"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
)

// mosquittoBin returns the mosquitto binary, or skips the test when it is
// missing unless CLEANMON_REQUIRE_TOOLS is set.
func mosquittoBin(t *testing.T) string {
	t.Helper()
	if bin, err := exec.LookPath("mosquitto"); err == nil {
		return bin
	}
	for _, p := range []string{"/usr/sbin/mosquitto", "/usr/local/sbin/mosquitto"} {
		if _, err := os.Stat(p); err == nil {
			return p
		}
	}
	if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
		t.Fatal("mosquitto not found (Debian: mosquitto) and CLEANMON_REQUIRE_TOOLS is set")
	}
	t.Skip("mosquitto not found (apt-get install mosquitto)")
	return ""
}

// broker is a real mosquitto on a loopback port, with a throw-away
// configuration; it can be killed and started again on the same port.
type broker struct {
	t    *testing.T
	bin  string
	conf string
	addr string // 127.0.0.1:port
	cmd  *exec.Cmd
	out  *strings.Builder
}

// newBroker writes the configuration (a listener on a free port, plus
// extra lines) and starts the broker; it is killed at the end of the test.
func newBroker(t *testing.T, extra string) *broker {
	t.Helper()
	b := &broker{t: t, bin: mosquittoBin(t)}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	b.addr = l.Addr().String()
	l.Close()
	b.conf = filepath.Join(t.TempDir(), "mosquitto.conf")
	body := fmt.Sprintf("listener %d 127.0.0.1\npersistence false\n%s", l.Addr().(*net.TCPAddr).Port, extra)
	if !strings.Contains(extra, "allow_anonymous") {
		body += "allow_anonymous true\n"
	}
	if os.Geteuid() == 0 {
		// Started as root, mosquitto would switch to its own user, which
		// cannot read the test's private temporary directory.
		body += "user root\n"
	}
	if err := os.WriteFile(b.conf, []byte(body), 0o600); err != nil {
		t.Fatal(err)
	}
	b.start()
	t.Cleanup(b.kill)
	return b
}

func (b *broker) start() {
	b.t.Helper()
	b.out = &strings.Builder{}
	b.cmd = exec.Command(b.bin, "-c", b.conf)
	b.cmd.Stdout, b.cmd.Stderr = b.out, b.out
	if err := b.cmd.Start(); err != nil {
		b.t.Fatal(err)
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		c, err := net.DialTimeout("tcp", b.addr, 200*time.Millisecond)
		if err == nil {
			c.Close()
			return
		}
		if time.Now().After(deadline) {
			b.t.Fatalf("mosquitto did not listen on %s within 10 s: %s", b.addr, b.out.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// kill stops the broker at once, as a crash would.
func (b *broker) kill() {
	if b.cmd != nil {
		b.cmd.Process.Kill()
		b.cmd.Wait()
		b.cmd = nil
	}
}

// startMosquitto runs a plain broker and returns its tcp:// URL.
func startMosquitto(t *testing.T) string {
	t.Helper()
	return "tcp://" + newBroker(t, "").addr
}

// publisher connects a plain client that publishes at QoS 1.
func publisher(t *testing.T, broker string) func(topic, payload string) {
	t.Helper()
	return publisherWith(t, mqtt.NewClientOptions().AddBroker(broker))
}

func publisherWith(t *testing.T, o *mqtt.ClientOptions) func(topic, payload string) {
	t.Helper()
	c := mqtt.NewClient(o.SetClientID("test-publisher").SetCleanSession(true))
	if tok := c.Connect(); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		t.Fatalf("publisher: %v", tok.Error())
	}
	t.Cleanup(func() { c.Disconnect(100) })
	return func(topic, payload string) {
		t.Helper()
		if tok := c.Publish(topic, 1, false, payload); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
			t.Fatalf("publish %s: %v", topic, tok.Error())
		}
	}
}

// mqttRig is the real ingest path behind a source: validation, a store
// that keeps one row per instrument and time, and a switch to make
// commits fail or block.
type mqttRig struct {
	*Ingest
	env   *EnvironmentIngest
	sink  *memSink
	esink *memEnvSink
	fails atomic.Int32 // commits still to fail
	block atomic.Bool  // commits wait for ctx
	calls atomic.Int32
}

func newMQTTRig(t *testing.T) *mqttRig {
	r := &mqttRig{sink: newMemSink(), esink: newMemEnvSink()}
	r.Ingest = newTestIngest(t, r.sink, IngestOptions{})
	r.env = NewEnvironmentIngest(demoEnvRegistry(t), r.esink, IngestOptions{Now: func() time.Time { return testNow }})
	return r
}

var errDiskGone = errors.New("store unavailable")

func (r *mqttRig) gate(ctx context.Context) error {
	r.calls.Add(1)
	if r.block.Load() {
		<-ctx.Done()
		return ctx.Err()
	}
	if r.fails.Add(-1) >= 0 {
		return errDiskGone
	}
	return nil
}

func (r *mqttRig) SubmitReadings(ctx context.Context, raws []RawReading) (Result, error) {
	if err := r.gate(ctx); err != nil {
		return Result{}, err
	}
	return r.Ingest.SubmitReadings(ctx, raws)
}

func (r *mqttRig) SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error) {
	if err := r.gate(ctx); err != nil {
		return Result{}, err
	}
	return r.env.SubmitEnvironment(ctx, raws)
}

// syncBuffer is a log sink the source's goroutines may write to.
type syncBuffer struct {
	mu sync.Mutex
	b  strings.Builder
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

func demoMQTT(broker, client string) MQTTConfig {
	return MQTTConfig{
		Broker: broker, ClientID: client,
		Topics: []MQTTTopic{
			{Topic: "building-c/readings/+", Kind: MQTTReadings},
			{Topic: "building-c/dp", Kind: MQTTPressure},
			{Topic: "building-c/hood/velocity", Sensor: "av-hood", Fields: map[string]string{"velocity_m_s": "v", "time": "ts"}},
			{Topic: "building-c/asm/th", Sensor: "th-asm"},
		},
	}
}

func runSource(t *testing.T, s *MQTTSource) (stop func()) {
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { defer close(done); s.Run(ctx) }()
	return func() {
		cancel()
		select {
		case <-done:
		case <-time.After(10 * time.Second):
			t.Fatal("the MQTT source did not stop within 10 s")
		}
	}
}

func reading(counter string, minute int) string {
	return fmt.Sprintf(`{"counter":%q,"time":"2026-03-02T09:%02d:00Z","volume_l":28.3,"counts":{"0.3":1200,"0.5":310,"5":2}}`, counter, minute)
}

// Published once, stored once: our own JSON, a flat payload through its
// field mapping, and a bad payload that is counted, acknowledged and does
// not hold up the ones behind it.
func TestMQTTSourcePublishStoredOnce(t *testing.T) {
	broker := startMosquitto(t)
	rig, prom := newMQTTRig(t), prometheus.NewRegistry()
	logs := &syncBuffer{}
	src, err := NewMQTTSource(demoMQTT(broker, "cleanmon-test-1"), demoEnvRegistry(t), rig, MQTTOptions{Metrics: prom, MinBackoff: 50 * time.Millisecond,
		Logger: slog.New(slog.NewTextHandler(logs, nil))})
	if err != nil {
		t.Fatal(err)
	}
	stop := runSource(t, src)
	defer stop()
	waitFor(t, 10*time.Second, "connected", src.Connected)
	pub := publisher(t, broker)
	pub("building-c/readings/pc-hood", reading("pc-hood", 0))
	pub("building-c/readings/pc-hood", `{"counter":"pc-hood","time":"2026-03-02T09:01:00Z","volume_l":28.3,"counts":{"0.3":1200,"0.5":310,"5":2},"colour":"red"}`)
	pub("building-c/hood/velocity", `{"v":0.44,"ts":1772442000,"rssi":-61}`) // 2026-03-02T09:00:00Z
	pub("building-c/asm/th", `{"time":"2026-03-02T09:00:00Z","temperature_c":21.1,"humidity_pct":44}`)
	pub("building-c/dp", `[{"sensor":"dp-hood-asm","time":"2026-03-02T09:00:00Z","pa":11.8},{"sensor":"dp-asm-gown","time":"2026-03-02T09:00:00Z","pa":14.1}]`)
	pub("building-c/readings/pc-hood", reading("pc-hood", 2))
	pub("building-c/readings/pc-hood", reading("pc-hood", 2)) // the sender's retry
	waitFor(t, 10*time.Second, "3 messages stored", func() bool {
		return testutil.ToFloat64(src.metrics.messages.WithLabelValues("building-c/readings/+", MQTTDuplicate)) >= 1
	})
	stop()
	if n, _ := rig.sink.stored(); n != 2 {
		t.Errorf("%d readings stored, want 2 (minutes 0 and 2, once each)", n)
	}
	if n := rig.esink.len(); n != 2 {
		t.Errorf("%d environment samples stored, want 2", n)
	}
	rig.esink.mu.Lock()
	e, ok := rig.esink.rows[dupKey{"av-hood", time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC).UnixNano()}]
	rig.esink.mu.Unlock()
	if !ok || !e.HasVelocity || e.VelocityMS != 0.44 || e.Zone != "coating-hood" {
		t.Errorf("flat av-hood sample %+v (found %v), want 0.44 m/s at 09:00", e, ok)
	}
	if _, np := rig.sink.stored(); np != 2 {
		t.Errorf("%d DP samples stored, want 2", np)
	}
	if l := logs.String(); !strings.Contains(l, "topic=building-c/readings/pc-hood") || !strings.Contains(l, "field=colour") {
		t.Errorf("the rejected payload is not logged with its topic and field:\n%s", l)
	}
	for res, want := range map[string]float64{MQTTStored: 2, MQTTRejected: 1, MQTTDuplicate: 1, MQTTCommitFail: 0} {
		if got := testutil.ToFloat64(src.metrics.messages.WithLabelValues("building-c/readings/+", res)); got != want {
			t.Errorf("readings %s: %g, want %g", res, got, want)
		}
	}
}

// A failed commit is not acknowledged: the session is dropped, and after
// the reconnect the broker delivers the message again. Nothing is lost,
// nothing stored twice.
func TestMQTTSourceRedeliversAfterFailedCommit(t *testing.T) {
	broker := startMosquitto(t)
	rig := newMQTTRig(t)
	rig.fails.Store(2)
	src, err := NewMQTTSource(demoMQTT(broker, "cleanmon-test-2"), demoEnvRegistry(t), rig, MQTTOptions{Metrics: prometheus.NewRegistry(), MinBackoff: 50 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	stop := runSource(t, src)
	defer stop()
	waitFor(t, 10*time.Second, "connected", src.Connected)
	pub := publisher(t, broker)
	for m := range 5 {
		pub("building-c/readings/pc-asm-1", strings.ReplaceAll(reading("pc-asm-1", m), `"0.3":1200,`, `"1":100,`))
	}
	waitFor(t, 20*time.Second, "5 readings stored", func() bool { n, _ := rig.sink.stored(); return n == 5 })
	stop()
	if f := testutil.ToFloat64(src.metrics.messages.WithLabelValues("building-c/readings/+", MQTTCommitFail)); f != 2 {
		t.Errorf("commit failures counted %g, want 2", f)
	}
	if c := testutil.ToFloat64(src.metrics.connects.WithLabelValues("ok")); c < 2 {
		t.Errorf("%g connections, want a reconnect after the failed commit", c)
	}
}

// A daemon that takes a message and stops before the commit (the sink
// blocks until shut down) leaves it unacknowledged; the next daemon with
// the same client id gets it from the broker.
func TestMQTTSourceStopBeforeCommitLosesNothing(t *testing.T) {
	broker := startMosquitto(t)
	rig := newMQTTRig(t)
	rig.block.Store(true)
	cfg := demoMQTT(broker, "cleanmon-test-3")
	src, err := NewMQTTSource(cfg, demoEnvRegistry(t), rig, MQTTOptions{})
	if err != nil {
		t.Fatal(err)
	}
	stop := runSource(t, src)
	waitFor(t, 10*time.Second, "connected", src.Connected)
	pub := publisher(t, broker)
	pub("building-c/asm/th", `{"time":"2026-03-02T09:05:00Z","temperature_c":22.4,"humidity_pct":47}`)
	waitFor(t, 10*time.Second, "the sink reached", func() bool { return rig.calls.Load() >= 1 })
	stop()
	if rig.esink.len() != 0 {
		t.Fatal("stored while the sink was blocked")
	}

	rig.block.Store(false)
	src2, err := NewMQTTSource(cfg, demoEnvRegistry(t), rig, MQTTOptions{})
	if err != nil {
		t.Fatal(err)
	}
	stop2 := runSource(t, src2)
	defer stop2()
	waitFor(t, 10*time.Second, "the message delivered again and stored", func() bool { return rig.esink.len() == 1 })
}

func TestValidateMQTT(t *testing.T) {
	reg := demoEnvRegistry(t)
	cases := []struct {
		name string
		mod  func(*MQTTConfig)
		path string
	}{
		{"valid", func(*MQTTConfig) {}, ""},
		{"no broker", func(c *MQTTConfig) { c.Broker = "" }, "mqtt.broker"},
		{"bad scheme", func(c *MQTTConfig) { c.Broker = "http://x:1" }, "mqtt.broker"},
		{"tls on tcp", func(c *MQTTConfig) { c.TLS = &MQTTTLS{CAFile: "ca.pem"} }, "mqtt.tls"},
		{"no client id", func(c *MQTTConfig) { c.ClientID = "" }, "mqtt.client_id"},
		{"qos 0", func(c *MQTTConfig) { q := 0; c.QoS = &q }, "mqtt.qos"},
		{"user without password", func(c *MQTTConfig) { c.Username = "u" }, "mqtt.password_file"},
		{"bad filter", func(c *MQTTConfig) { c.Topics[0].Topic = "a/#/b" }, "mqtt.topics[0].topic"},
		{"unknown counter", func(c *MQTTConfig) { c.Topics[0] = MQTTTopic{Topic: "x", Counter: "pc-x"} }, "mqtt.topics[0].counter"},
		{"kind against sensor", func(c *MQTTConfig) { c.Topics[3].Kind = MQTTPressure }, "mqtt.topics[3].kind"},
		{"flat without instrument", func(c *MQTTConfig) { c.Topics[0].Fields = map[string]string{"time": "ts"} }, "mqtt.topics[0].fields"},
		{"flat channel of another kind", func(c *MQTTConfig) { c.Topics[2].Fields["pa"] = "p" }, "mqtt.topics[2].fields.pa"},
		{"field read twice", func(c *MQTTConfig) { c.Topics[2].Fields["time"] = "v" }, "mqtt.topics[2].fields.velocity_m_s"},
		{"no kind", func(c *MQTTConfig) { c.Topics[1].Kind = "" }, "mqtt.topics[1].kind"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := demoMQTT("tcp://127.0.0.1:1883", "cleanmon")
			cfg.Topics[2].Fields = map[string]string{"velocity_m_s": "v", "time": "ts"}
			c.mod(&cfg)
			errs := ValidateMQTT(&cfg, reg)
			if c.path == "" {
				if len(errs) > 0 {
					t.Fatalf("valid section refused: %v", errs)
				}
				return
			}
			for _, fe := range errs {
				if fe.Path == c.path {
					return
				}
			}
			t.Errorf("no error at %s; got %v", c.path, errs)
		})
	}
}

// Topic filters as MQTT 3.1.1 §4.7 defines them (its examples, from
// memory).
func TestTopicMatches(t *testing.T) {
	cases := []struct {
		filter, topic string
		want          bool
	}{
		{"sport/tennis/player1/#", "sport/tennis/player1", true},
		{"sport/tennis/player1/#", "sport/tennis/player1/ranking", true},
		{"sport/#", "sport", true},
		{"sport/tennis/+", "sport/tennis/player1", true},
		{"sport/tennis/+", "sport/tennis/player1/ranking", false},
		{"sport/+", "sport", false},
		{"+/+", "/finance", true},
		{"#", "$SYS/broker", false},
		{"+/monitor/Clients", "$SYS/monitor/Clients", false},
		{"$SYS/#", "$SYS/broker", true},
	}
	for _, c := range cases {
		if got := topicMatches(c.filter, c.topic); got != c.want {
			t.Errorf("%q ~ %q: %v, want %v", c.filter, c.topic, got, c.want)
		}
	}
}

// Flat payloads: the mapped field named in errors, duplicates refused.
func TestDecodeFlatPayload(t *testing.T) {
	reg := demoEnvRegistry(t)
	top := resolveTopic("t", MQTTTopic{Topic: "x", Counter: "pc-hood", Fields: map[string]string{"0.5": "pm05", "time": "ts", "volume_l": "vol"}}, reg, func(string, string, ...any) {})
	b, ie := decodePayload(&top, []byte(`{"ts":"2026-03-02T09:00:00Z","vol":28.3,"0.3":1000,"pm05":300,"5":1,"battery":88}`), reg)
	if ie != nil || len(b.readings) != 1 || b.readings[0].Counts["0.5"].N != 300 || *b.readings[0].VolumeL != 28.3 || b.readings[0].Counter != "pc-hood" {
		t.Fatalf("%+v %v", b, ie)
	}
	for payload, field := range map[string]string{
		`{"ts":"2026-03-02T09:00:00Z","vol":"28.3"}`: "vol (volume_l)",
		`{"ts":true}`: "ts (time)",
		`{"ts":"2026-03-02T09:00:00Z","vol":1,"vol":2}`:    "",
		`{"ts":"2026-03-02T09:00:00Z","vol":1,"status":3}`: "status",
		`[{"ts":"2026-03-02T09:00:00Z"}]`:                  "",
	} {
		_, ie := decodePayload(&top, []byte(payload), reg)
		if ie == nil || ie.Field != field {
			t.Errorf("%s: %v, want an error at %q", payload, ie, field)
		}
	}
}

// Our own JSON on a topic that names its instrument: an element without
// an id is the topic's, one naming another instrument is refused.
func TestDecodeOwnJSONOnInstrumentTopic(t *testing.T) {
	reg := demoEnvRegistry(t)
	top := resolveTopic("t", MQTTTopic{Topic: "x", Counter: "pc-hood"}, reg, func(string, string, ...any) {})
	b, ie := decodePayload(&top, []byte(`[{"time":"2026-03-02T09:00:00Z","volume_l":28.3,"counts":{"0.3":5,"0.5":2,"5":0}},{"counter":"pc-hood","time":"2026-03-02T09:01:00Z","volume_l":28.3,"counts":{"0.3":7,"0.5":3,"5":1}}]`), reg)
	if ie != nil || len(b.readings) != 2 || b.readings[0].Counter != "pc-hood" || b.readings[0].Counts["0.3"].N != 5 || b.readings[1].Counts["0.3"].N != 7 {
		t.Fatalf("%+v %v", b.readings, ie)
	}
	_, ie = decodePayload(&top, []byte(`[{"time":"t"},{"counter":"pc-met","time":"t"}]`), reg)
	if ie == nil || ie.Index != 1 || ie.Field != "counter" {
		t.Fatalf("%v, want element 1, counter", ie)
	}
}
