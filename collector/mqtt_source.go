package collector

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math/rand/v2"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	mqtt "github.com/eclipse/paho.mqtt.golang"
	"github.com/prometheus/client_golang/prometheus"

	"github.com/prometheus/common/model"
)

// ErrMQTT wraps failures of the MQTT source's set-up and sessions.
var ErrMQTT = errors.New("collector: mqtt")

// MQTTSink takes what the MQTT source decodes. Each method returns only
// once the data is durable (then the message is acknowledged to the
// broker), or with an *InputError for data it refuses (the message is
// acknowledged and counted as rejected), or with any other error when
// nothing may be assumed stored (the message is not acknowledged: the
// session is dropped and the broker delivers it again). Each method must
// return when ctx ends. An [*Ingest] and an [*EnvironmentIngest] together
// provide the three methods.
type MQTTSink interface {
	SubmitReadings(ctx context.Context, raws []RawReading) (Result, error)
	SubmitPressure(ctx context.Context, raws []RawPressure) (Result, error)
	SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error)
}

// Results of a message: the result label of cleanmon_mqtt_messages_total.
const (
	MQTTStored     = "stored"        // committed (some or all of it new)
	MQTTDuplicate  = "duplicate"     // everything in it was stored before (a redelivery)
	MQTTRejected   = "rejected"      // bad payload: counted, logged, acknowledged
	MQTTUnrouted   = "unrouted"      // a topic no subscription claims (a stale persistent subscription)
	MQTTCommitFail = "commit-failed" // not stored, not acknowledged: delivered again
)

// MQTTOptions tunes an [MQTTSource]; zero fields take the defaults.
type MQTTOptions struct {
	// Metrics is where the source's metrics are registered; nil: nowhere.
	Metrics prometheus.Registerer
	// Logger receives connection changes and rejected payloads; nil:
	// discarded.
	Logger *slog.Logger
	// MinBackoff is the first wait before reconnecting, default 1 s; it
	// doubles at each failure up to the configuration's max_backoff.
	MinBackoff time.Duration
	// MaxPayload bounds one message, default 1 MiB; larger ones are
	// rejected.
	MaxPayload int
}

// MQTTSource subscribes to the broker of an [MQTTConfig] and hands each
// message's readings or samples to an [MQTTSink], acknowledging the
// message only once the sink has made them durable. The session is
// persistent (clean session off, QoS 1), so messages that arrive while the
// daemon is away, or that it took but did not store, wait at the broker.
//
// Messages are handled one at a time in arrival order. When the sink
// fails, the source drops the session without acknowledging and
// reconnects after a backoff; the broker then delivers the message again,
// and the store drops what it already has. A payload that cannot be
// stored (malformed, an unknown instrument, a value out of range) is
// logged with its topic and field, counted, and acknowledged, so that it
// never blocks the subscription.
type MQTTSource struct {
	cfg      MQTTConfig
	topics   []mqttTopic
	reg      *Registry
	sink     MQTTSink
	opt      MQTTOptions
	password string
	log      *slog.Logger
	metrics  *mqttMetrics
	newOpts  func() (*mqtt.ClientOptions, error)

	connected atomic.Bool
}

// NewMQTTSource checks the configuration against the registry, reads the
// password file and certificates, and registers the metrics. The error
// wraps ErrMQTT (or ErrConfig, with every FieldError, for a bad section).
func NewMQTTSource(cfg MQTTConfig, reg *Registry, sink MQTTSink, opt MQTTOptions) (*MQTTSource, error) {
	if ferrs := ValidateMQTT(&cfg, reg); len(ferrs) > 0 {
		errs := make([]error, len(ferrs))
		msgs := make([]string, len(ferrs))
		for i, fe := range ferrs {
			errs[i], msgs[i] = fe, fe.Error()
		}
		return nil, fmt.Errorf("%w: %s%w", ErrConfig, strings.Join(msgs, "; "), hidden{errors.Join(errs...)})
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if opt.MinBackoff <= 0 {
		opt.MinBackoff = DefaultMQTTMinBackoff
	}
	if opt.MaxPayload <= 0 {
		opt.MaxPayload = DefaultMQTTMaxPayload
	}
	s := &MQTTSource{cfg: cfg, reg: reg, sink: sink, opt: opt, log: opt.Logger}
	for i, t := range cfg.Topics {
		s.topics = append(s.topics, resolveTopic(fmt.Sprintf("mqtt.topics[%d]", i), t, reg, func(string, string, ...any) {}))
	}
	pw, err := cfg.password()
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrMQTT, err)
	}
	s.password = pw
	tlsCfg, err := cfg.tlsConfig()
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrMQTT, err)
	}
	s.newOpts = func() (*mqtt.ClientOptions, error) {
		o := mqtt.NewClientOptions().AddBroker(cfg.Broker).SetClientID(cfg.ClientID).
			SetCleanSession(false).SetAutoAckDisabled(true).SetOrderMatters(true).
			SetAutoReconnect(false).SetConnectRetry(false).SetResumeSubs(false).
			SetKeepAlive(durOr(cfg.KeepAlive, DefaultMQTTKeepAlive)).
			SetConnectTimeout(durOr(cfg.ConnectTimeout, DefaultMQTTConnectTimeout)).
			SetTLSConfig(tlsCfg)
		if cfg.Username != "" {
			o.SetUsername(cfg.Username).SetPassword(s.password)
		}
		return o, nil
	}
	m, err := newMQTTMetrics(opt.Metrics, s.topics)
	if err != nil {
		return nil, fmt.Errorf("%w: metrics: %w", ErrMQTT, err)
	}
	s.metrics = m
	return s, nil
}

func durOr(d model.Duration, def time.Duration) time.Duration {
	if d > 0 {
		return time.Duration(d)
	}
	return def
}

// Connected tells whether a session with the broker is up now.
func (s *MQTTSource) Connected() bool { return s.connected.Load() }

// Run keeps a session with the broker until ctx ends, reconnecting with
// exponential backoff (±10 % jitter) after every lost connection or
// failed commit; it returns nil once ctx ends and the session is closed.
func (s *MQTTSource) Run(ctx context.Context) error {
	maxBackoff := durOr(s.cfg.MaxBackoff, DefaultMQTTMaxBackoff)
	backoff := s.opt.MinBackoff
	for ctx.Err() == nil {
		began := time.Now()
		err := s.session(ctx)
		if ctx.Err() != nil {
			return nil
		}
		if time.Since(began) > maxBackoff {
			backoff = s.opt.MinBackoff // the last session was a healthy one
		}
		s.log.Warn("mqtt session ended; reconnecting", "broker", s.cfg.Broker, "err", err, "after", backoff)
		t := time.NewTimer(time.Duration(float64(backoff) * (0.9 + 0.2*rand.Float64())))
		select {
		case <-ctx.Done():
			t.Stop()
			return nil
		case <-t.C:
		}
		backoff = min(2*backoff, maxBackoff)
	}
	return nil
}

// session is one connection: its context (ended to unblock a sink when
// the session is dropped) and the first reason it ended.
type session struct {
	ctx    context.Context
	once   sync.Once
	ended  chan struct{}
	err    error
	broken atomic.Bool
}

func (ss *session) end(err error) {
	ss.once.Do(func() {
		ss.err = err
		ss.broken.Store(true)
		close(ss.ended)
	})
}

// session connects, subscribes, and serves messages until the session
// ends or ctx does.
func (s *MQTTSource) session(ctx context.Context) error {
	sctx, cancel := context.WithCancel(ctx)
	defer cancel()
	ss := &session{ctx: sctx, ended: make(chan struct{})}
	o, err := s.newOpts()
	if err != nil {
		return err
	}
	// Messages of the persistent session may arrive before Subscribe
	// returns: the default handler takes every message.
	o.SetDefaultPublishHandler(func(_ mqtt.Client, m mqtt.Message) { s.handle(ss, m) })
	o.SetConnectionLostHandler(func(_ mqtt.Client, err error) { ss.end(fmt.Errorf("%w: connection lost: %w", ErrMQTT, err)) })
	c := mqtt.NewClient(o)
	timeout := durOr(s.cfg.ConnectTimeout, DefaultMQTTConnectTimeout)
	tok := c.Connect()
	if !tok.WaitTimeout(timeout + time.Second) {
		s.metrics.connects.WithLabelValues("failed").Inc()
		go c.Disconnect(0)
		return fmt.Errorf("%w: connecting to %s: no answer within %s", ErrMQTT, s.cfg.Broker, timeout)
	}
	if err := tok.Error(); err != nil {
		s.metrics.connects.WithLabelValues("failed").Inc()
		return fmt.Errorf("%w: connecting to %s: %w", ErrMQTT, s.cfg.Broker, err)
	}
	s.metrics.connects.WithLabelValues("ok").Inc()
	s.connected.Store(true)
	s.metrics.connected.Set(1)
	defer func() {
		s.connected.Store(false)
		s.metrics.connected.Set(0)
	}()
	s.log.Info("mqtt connected", "broker", s.cfg.Broker, "client_id", s.cfg.ClientID)
	filters := make(map[string]byte, len(s.topics))
	for _, t := range s.topics {
		filters[t.Topic] = 1
	}
	sub := c.SubscribeMultiple(filters, nil)
	if !sub.WaitTimeout(timeout) || sub.Error() != nil {
		ss.end(fmt.Errorf("%w: subscribing: %v", ErrMQTT, errOr(sub.Error(), "no answer")))
	} else if st, ok := sub.(*mqtt.SubscribeToken); ok {
		// The library hands out the granted QoS only on its concrete
		// token type; a refusal (0x80) is no error to it.
		for f, q := range st.Result() {
			if q != 1 {
				ss.end(fmt.Errorf("%w: the broker granted %q QoS %d, not 1 (0x80 is a refusal: check its access control)", ErrMQTT, f, q))
			}
		}
	}
	select {
	case <-ctx.Done():
	case <-ss.ended:
	}
	ss.end(ctx.Err())
	cancel() // unblock a sink still committing: its message stays unacknowledged
	c.Disconnect(250)
	return ss.err
}

func errOr(err error, msg string) error {
	if err != nil {
		return err
	}
	return errors.New(msg)
}

// handle takes one message: decode, commit, and only then acknowledge.
func (s *MQTTSource) handle(ss *session, m mqtt.Message) {
	if ss.broken.Load() {
		return // the session is being dropped: the broker delivers it again
	}
	t := s.route(m.Topic())
	if t == nil {
		s.metrics.count("", MQTTUnrouted)
		s.log.Warn("mqtt message on a topic no subscription claims; acknowledged and dropped", "topic", m.Topic())
		m.Ack()
		return
	}
	if len(m.Payload()) > s.opt.MaxPayload {
		s.reject(t, m, inputErrRule(0, "", RuleTooLarge, "payload of %d bytes is beyond the %d-byte limit", len(m.Payload()), s.opt.MaxPayload))
		return
	}
	b, ie := decodePayload(t, m.Payload(), s.reg)
	if ie != nil {
		s.reject(t, m, ie)
		return
	}
	res, err := s.commit(ss.ctx, t, &b)
	var in *InputError
	switch {
	case errors.As(err, &in):
		s.reject(t, m, in)
	case err != nil:
		s.metrics.count(t.Topic, MQTTCommitFail)
		s.log.Error("mqtt message not stored; the session is dropped so that the broker delivers it again", "topic", m.Topic(), "err", err)
		ss.end(fmt.Errorf("%w: commit failed: %w", ErrMQTT, err))
	default:
		m.Ack()
		if res.Accepted > 0 {
			s.metrics.count(t.Topic, MQTTStored)
		} else {
			s.metrics.count(t.Topic, MQTTDuplicate)
		}
	}
}

func (s *MQTTSource) reject(t *mqttTopic, m mqtt.Message, ie *InputError) {
	s.metrics.count(t.Topic, MQTTRejected)
	s.log.Warn("mqtt payload rejected; acknowledged and dropped", "topic", m.Topic(), "index", ie.Index, "field", ie.Field, "err", ie.Msg)
	m.Ack()
}

// commit hands the batch to the sink.
func (s *MQTTSource) commit(ctx context.Context, t *mqttTopic, b *mqttBatch) (Result, error) {
	if b.len() == 0 {
		return Result{}, inputErrRule(0, "", RuleSyntax, "empty: the payload holds no %s", t.kind)
	}
	switch t.kind {
	case MQTTReadings:
		return s.sink.SubmitReadings(ctx, b.readings)
	case MQTTPressure:
		return s.sink.SubmitPressure(ctx, b.pressure)
	}
	return s.sink.SubmitEnvironment(ctx, b.env)
}

// route returns the first subscription whose filter matches topic.
func (s *MQTTSource) route(topic string) *mqttTopic {
	for i := range s.topics {
		if topicMatches(s.topics[i].Topic, topic) {
			return &s.topics[i]
		}
	}
	return nil
}

// mqttMetrics are the source's Prometheus metrics.
type mqttMetrics struct {
	messages  *prometheus.CounterVec
	connects  *prometheus.CounterVec
	connected prometheus.Gauge
}

func newMQTTMetrics(r prometheus.Registerer, topics []mqttTopic) (*mqttMetrics, error) {
	m := &mqttMetrics{
		messages: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "cleanmon_mqtt_messages_total",
			Help: "MQTT messages taken, by subscription (topic filter) and result: stored, duplicate, rejected, unrouted, commit-failed.",
		}, []string{"subscription", "result"}),
		connects: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "cleanmon_mqtt_connection_attempts_total",
			Help: "Attempts to connect to the MQTT broker, by result (ok, failed).",
		}, []string{"result"}),
		connected: prometheus.NewGauge(prometheus.GaugeOpts{
			Name: "cleanmon_mqtt_connected",
			Help: "1 while a session with the MQTT broker is up, 0 otherwise.",
		}),
	}
	// Every series exists from the start, so that a rate over it is
	// defined before the first message.
	for _, t := range topics {
		for _, res := range []string{MQTTStored, MQTTDuplicate, MQTTRejected, MQTTCommitFail} {
			m.messages.WithLabelValues(t.Topic, res)
		}
	}
	m.messages.WithLabelValues("", MQTTUnrouted)
	m.connects.WithLabelValues("ok")
	m.connects.WithLabelValues("failed")
	if r != nil {
		for _, c := range []prometheus.Collector{m.messages, m.connects, m.connected} {
			if err := r.Register(c); err != nil {
				return nil, err
			}
		}
	}
	return m, nil
}

func (m *mqttMetrics) count(sub, result string) { m.messages.WithLabelValues(sub, result).Inc() }
