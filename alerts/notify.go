package alerts

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"maps"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"time"

	"github.com/prometheus/common/model"
)

// Notifier delivers one transition to one receiver. An error means "try
// again later": the delivery stays in the outbox. A receiver that answered
// but refused this delivery (a 4xx other than 408, 425 or 429) is reported
// by wrapping ErrRejected, so the dispatcher keeps retrying it on its own
// schedule instead of holding back the deliveries behind it.
type Notifier interface {
	Name() string
	Notify(ctx context.Context, t Transition) error
}

// Resender is a notifier that must re-announce what is still firing, as
// Alertmanager resolves an alert that is not resent. The daemon runs it
// beside the dispatcher with the engine's open alarms.
type Resender interface {
	Run(ctx context.Context, active func() []Alarm) error
}

// Errors of the notifiers and the dispatcher.
var (
	// ErrNotifyConfig marks a notifier configuration that cannot be used.
	ErrNotifyConfig = errors.New("alerts: invalid notifier configuration")
	// ErrDelivery is a failed attempt worth repeating: the receiver was
	// unreachable, too slow or answered with a server error.
	ErrDelivery = errors.New("alerts: delivery failed")
	// ErrRejected is a receiver that answered and refused this delivery.
	ErrRejected = errors.New("alerts: delivery rejected by the receiver")
)

// DefaultNotifyTimeout bounds one HTTP attempt of a notifier that sets
// no timeout of its own.
const DefaultNotifyTimeout = 10 * time.Second

// LogNotifierName is the name of the notifier that writes transitions to
// the daemon's log.
const LogNotifierName = "log"

// NotifyConfig is the `notifications:` section of the site configuration.
type NotifyConfig struct {
	// Log writes every transition to the daemon's log as well.
	Log           bool                 `yaml:"log"`
	Webhooks      []WebhookConfig      `yaml:"webhooks"`
	Alertmanagers []AlertmanagerConfig `yaml:"alertmanagers"`
	Retry         RetryConfig          `yaml:"retry"`
	// Labels go with every alert, message and heartbeat of every notifier
	// (site: veldmark-c, suite: building-c), so receivers can route by
	// site; a notifier's own labels of the same name win.
	Labels map[string]string `yaml:"labels"`
	// Heartbeat is the period of the heartbeat sent to every webhook and
	// Alertmanager (default DefaultHeartbeat): its absence is how a
	// receiver's dead-man's switch learns that monitoring is lost.
	Heartbeat model.Duration `yaml:"heartbeat"`
}

// HeartbeatEvery is the configured heartbeat period, or its default.
func (c NotifyConfig) HeartbeatEvery() time.Duration {
	if c.Heartbeat > 0 {
		return time.Duration(c.Heartbeat)
	}
	return DefaultHeartbeat
}

// checkLabels checks label names and values for every receiver.
func checkLabels(p string, labels map[string]string) []FieldError {
	var errs []FieldError
	for _, k := range sortedKeys(labels) {
		lp := p + "." + k
		switch {
		case !validLabelName(k):
			errs = append(errs, FieldError{lp, fmt.Sprintf("%q is not a label name (letters, digits and '_', not starting with a digit or \"__\")", k)})
		case amOwnLabels[k]:
			errs = append(errs, FieldError{lp, "set by the notifier from the alarm; choose another name"})
		case labels[k] == "":
			errs = append(errs, FieldError{lp, "an empty label value is the same as no label"})
		}
	}
	return errs
}

// withLabels is own over site: the notifier's labels win.
func withLabels(site, own map[string]string) map[string]string {
	if len(site) == 0 {
		return own
	}
	out := maps.Clone(site)
	maps.Copy(out, own)
	return out
}

// RetryConfig shapes the retry of failed deliveries: the wait doubles
// from Base after each failure up to Max. Deliveries are never dropped.
type RetryConfig struct {
	Base model.Duration `yaml:"base"`
	Max  model.Duration `yaml:"max"`
}

// notifyConfigPath is where NotifyConfig sits in the site configuration;
// ValidateNotify reports paths from here.
const notifyConfigPath = "notifications"

// ValidateNotify checks the notifications section and reports every
// problem with its path ("notifications.webhooks[1].url"). An empty answer
// means BuildNotifiers will accept it.
func ValidateNotify(c NotifyConfig) []FieldError {
	var errs []FieldError
	p := notifyConfigPath
	seen := map[string]string{}
	name := func(path, n string) {
		if err := checkNotifierName(n); err != nil {
			errs = append(errs, FieldError{path, err.Error()})
			return
		}
		if prev, dup := seen[n]; dup {
			errs = append(errs, FieldError{path, fmt.Sprintf("notifier name %q already used at %s", n, prev)})
			return
		}
		seen[n] = path
	}
	if c.Log {
		seen[LogNotifierName] = p + ".log"
	}
	for i, w := range c.Webhooks {
		wp := fmt.Sprintf("%s.webhooks[%d]", p, i)
		name(wp+".name", w.Name)
		errs = append(errs, w.validate(wp)...)
	}
	for i, a := range c.Alertmanagers {
		ap := fmt.Sprintf("%s.alertmanagers[%d]", p, i)
		name(ap+".name", a.withDefaults().Name)
		errs = append(errs, a.validate(ap)...)
	}
	errs = append(errs, checkLabels(p+".labels", c.Labels)...)
	for i, w := range c.Webhooks {
		errs = append(errs, checkLabels(fmt.Sprintf("%s.webhooks[%d].labels", p, i), w.Labels)...)
	}
	if c.Heartbeat < 0 {
		errs = append(errs, FieldError{p + ".heartbeat", fmt.Sprintf("%s: must be positive", time.Duration(c.Heartbeat))})
	} else if c.Heartbeat > 0 && time.Duration(c.Heartbeat) < time.Second {
		errs = append(errs, FieldError{p + ".heartbeat", fmt.Sprintf("%s: at least 1s", time.Duration(c.Heartbeat))})
	}
	if c.Retry.Base < 0 {
		errs = append(errs, FieldError{p + ".retry.base", fmt.Sprintf("%s: must be positive", time.Duration(c.Retry.Base))})
	}
	if c.Retry.Max < 0 {
		errs = append(errs, FieldError{p + ".retry.max", fmt.Sprintf("%s: must be positive", time.Duration(c.Retry.Max))})
	}
	if c.Retry.Base > 0 && c.Retry.Max > 0 && c.Retry.Max < c.Retry.Base {
		errs = append(errs, FieldError{p + ".retry.max", fmt.Sprintf("%s is below retry.base %s", time.Duration(c.Retry.Max), time.Duration(c.Retry.Base))})
	}
	return errs
}

// The kinds BuildNotifiers lists beside All must carry what it lists them
// for.
var (
	_ Heartbeater         = (*Webhook)(nil)
	_ CheckpointPublisher = (*Webhook)(nil)
	_ Heartbeater         = (*Alertmanager)(nil)
	_ CheckpointPublisher = (*Alertmanager)(nil)
	_ Resender            = (*Alertmanager)(nil)
)

// NotifierSet is the configured notifiers, and beside them the ones that
// also carry the daemon's heartbeat, audit checkpoints or resends, and
// report a partial failure. BuildNotifiers fills the lists from the kinds
// it makes, so nothing that uses the set has to ask a notifier what else
// it can do.
type NotifierSet struct {
	// All are the notifiers of transitions, in the order log, webhooks,
	// Alertmanagers.
	All         []Notifier
	Heartbeats  []Heartbeater
	Checkpoints []CheckpointPublisher
	Resenders   []Resender
	degraders   map[string]func() string
}

// Degraded is the partial failure the named notifier reports ("" when
// none, or when it cannot fail in part); a [DispatcherOptions.Degraded].
func (s *NotifierSet) Degraded(notifier string) string {
	if f := s.degraders[notifier]; f != nil {
		return f()
	}
	return ""
}

// BuildNotifiers makes the configured notifiers. client is shared by the
// HTTP notifiers (nil: one that follows no redirects); l is the log
// notifier's logger.
func BuildNotifiers(c NotifyConfig, client *http.Client, l *slog.Logger) (*NotifierSet, error) {
	if errs := ValidateNotify(c); len(errs) > 0 {
		msgs := make([]string, len(errs))
		for i, e := range errs {
			msgs[i] = e.Error()
		}
		return nil, fmt.Errorf("%w: %s", ErrNotifyConfig, strings.Join(msgs, "; "))
	}
	s := &NotifierSet{degraders: map[string]func() string{}}
	if c.Log {
		s.All = append(s.All, NewLogNotifier(l))
	}
	for _, w := range c.Webhooks {
		w.Labels = withLabels(c.Labels, w.Labels)
		n, err := NewWebhook(w, client)
		if err != nil {
			return nil, err
		}
		s.All, s.Heartbeats, s.Checkpoints = append(s.All, n), append(s.Heartbeats, n), append(s.Checkpoints, n)
	}
	for _, a := range c.Alertmanagers {
		a.Labels = withLabels(c.Labels, a.Labels)
		n, err := NewAlertmanager(a, client)
		if err != nil {
			return nil, err
		}
		s.All, s.Heartbeats, s.Checkpoints = append(s.All, n), append(s.Heartbeats, n), append(s.Checkpoints, n)
		s.Resenders = append(s.Resenders, n)
		s.degraders[n.Name()] = n.Degraded
	}
	return s, nil
}

// DispatcherOptions returns the retry settings of the section as
// dispatcher options (zero fields take the dispatcher's defaults).
func (c NotifyConfig) DispatcherOptions() DispatcherOptions {
	return DispatcherOptions{BaseBackoff: time.Duration(c.Retry.Base), MaxBackoff: time.Duration(c.Retry.Max)}
}

// checkNotifierName keeps names usable as outbox keys and metric label
// values: short, printable, no spaces.
func checkNotifierName(n string) error {
	if n == "" {
		return errors.New("missing: every notifier needs a name (it labels its outbox entries and metrics)")
	}
	if len(n) > 64 {
		return fmt.Errorf("%q: at most 64 characters", n)
	}
	for _, r := range n {
		ok := r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_' || r == '.'
		if !ok {
			return fmt.Errorf("%q: use letters, digits, '-', '_' and '.' only", n)
		}
	}
	return nil
}

// checkHTTPURL accepts an absolute http or https URL.
func checkHTTPURL(raw string) (*url.URL, error) {
	if strings.TrimSpace(raw) == "" {
		return nil, errors.New("missing: an http:// or https:// URL")
	}
	u, err := url.Parse(raw)
	if err != nil {
		return nil, fmt.Errorf("%q is not an http:// or https:// URL: %v", raw, err)
	}
	if u.Scheme != "http" && u.Scheme != "https" {
		return nil, fmt.Errorf("%q: want an http:// or https:// URL", u.Redacted())
	}
	if u.Host == "" {
		return nil, fmt.Errorf("%q: the URL names no host", u.Redacted())
	}
	return u, nil
}

// noRedirectClient is the default HTTP client of the notifiers: a
// redirected POST would carry the signature and the body somewhere the
// configuration does not name, so a redirect is an answer, not a hop.
func noRedirectClient() *http.Client {
	return &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
}

// retryAfterError carries a receiver's Retry-After hint.
type retryAfterError struct {
	err   error
	after time.Duration
}

func (e *retryAfterError) Error() string             { return e.err.Error() }
func (e *retryAfterError) Unwrap() error             { return e.err }
func (e *retryAfterError) RetryAfter() time.Duration { return e.after }

// parseRetryAfter reads a Retry-After header: seconds, or an HTTP date.
func parseRetryAfter(h string, now time.Time) time.Duration {
	h = strings.TrimSpace(h)
	if h == "" {
		return 0
	}
	if secs, err := strconv.ParseInt(h, 10, 32); err == nil {
		if secs < 0 {
			return 0
		}
		return time.Duration(secs) * time.Second
	}
	if t, err := http.ParseTime(h); err == nil && t.After(now) {
		return t.Sub(now)
	}
	return 0
}

// httpStatusError classifies a receiver's answer: nil for 2xx, ErrDelivery
// for what may pass (timeouts, throttling, server errors), ErrRejected for
// the rest.
func httpStatusError(resp *http.Response, snippet string, now time.Time) error {
	code := resp.StatusCode
	if code >= 200 && code < 300 {
		return nil
	}
	msg := resp.Status
	if snippet != "" {
		msg += ": " + snippet
	}
	switch {
	case code == http.StatusRequestTimeout, code == http.StatusTooEarly, code == http.StatusTooManyRequests, code >= 500:
		err := fmt.Errorf("%w: %s", ErrDelivery, msg)
		if ra := parseRetryAfter(resp.Header.Get("Retry-After"), now); ra > 0 {
			return &retryAfterError{err: err, after: ra}
		}
		return err
	default:
		return fmt.Errorf("%w: %s", ErrRejected, msg)
	}
}

// LogNotifier writes each transition to a structured log. It never fails.
type LogNotifier struct{ l *slog.Logger }

// NewLogNotifier returns the log notifier, named LogNotifierName (nil l:
// the default logger).
func NewLogNotifier(l *slog.Logger) Notifier {
	if l == nil {
		l = slog.Default()
	}
	return &LogNotifier{l: l}
}

// Name is LogNotifierName.
func (n *LogNotifier) Name() string { return LogNotifierName }

// Notify logs the transition: at warning level when an alarm becomes
// active, at info level otherwise.
func (n *LogNotifier) Notify(ctx context.Context, t Transition) error {
	a := t.Alarm
	level := slog.LevelInfo
	if t.To == StateActive {
		level = slog.LevelWarn
	}
	attrs := []slog.Attr{
		slog.String("key", t.Key), slog.String("alarm", t.AlarmID),
		slog.String("zone", a.Zone), slog.String("kind", a.Kind), slog.String("alarm_level", a.Level),
		slog.String("from", t.From), slog.String("to", t.To), slog.Time("at", t.Time),
	}
	for _, kv := range [][2]string{{"location", a.Location}, {"counter", a.Counter}, {"sensor", a.Sensor}, {"by", t.By}, {"comment", t.Comment}} {
		if kv[1] != "" {
			attrs = append(attrs, slog.String(kv[0], kv[1]))
		}
	}
	if a.SizeUM != nil {
		attrs = append(attrs, slog.Float64("size_um", *a.SizeUM))
	}
	if a.Unit != "" {
		attrs = append(attrs, slog.Float64("value", a.Value), slog.Float64("threshold", a.Threshold), slog.String("unit", a.Unit))
	}
	msg := a.Message
	if msg == "" {
		msg = "alarm " + t.To
	}
	n.l.LogAttrs(ctx, level, msg, attrs...)
	return nil
}
