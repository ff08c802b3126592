package alerts

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"cleanmon/classify"

	"github.com/prometheus/common/model"
)

// Defaults of an Alertmanager notifier.
const (
	DefaultAlertmanagerName = "alertmanager"
	// DefaultResend is how often firing alarms are posted again.
	DefaultResend = time.Minute
)

// AlertmanagerHold is how far ahead a firing alert's end is posted, and
// posted again at every resend. Alertmanager resolves an alert at its end
// time; a daemon that stops or dies must never make an open alarm look
// resolved, so the end lies far beyond any outage: only an explicit clear
// resolves an alarm. The daemon's silence is told by its heartbeat
// instead (see Heartbeater).
const AlertmanagerHold = 365 * 24 * time.Hour

// AlertmanagerConfig is one Alertmanager, or one cluster of peers: every
// alert goes to every peer, as the peers do not share alerts among
// themselves.
type AlertmanagerConfig struct {
	// Name defaults to DefaultAlertmanagerName.
	Name string `yaml:"name"`
	// URLs are the peers' base URLs ("http://am-1:9093"); the notifier
	// posts to <URL>/api/v2/alerts.
	URLs []string `yaml:"urls"`
	// Timeout bounds one post to one peer (default DefaultNotifyTimeout).
	Timeout model.Duration `yaml:"timeout"`
	// Resend is how often firing alarms are posted again (default 1m).
	Resend model.Duration `yaml:"resend"`
	// ExternalURL is where users reach this daemon; alerts link back to
	// the zone from there.
	ExternalURL string `yaml:"external_url"`
	// Labels are added to every alert (site: veldmark-c, say) for routing.
	Labels map[string]string `yaml:"labels"`
}

// amOwnLabels are set by the notifier from the alarm.
var amOwnLabels = map[string]bool{
	"alertname": true, "zone": true, "kind": true, "level": true, "severity": true,
	"location": true, "counter": true, "sensor": true, "size_um": true,
}

func (c AlertmanagerConfig) withDefaults() AlertmanagerConfig {
	if c.Name == "" {
		c.Name = DefaultAlertmanagerName
	}
	return c
}

func (c AlertmanagerConfig) validate(p string) []FieldError {
	var errs []FieldError
	if len(c.URLs) == 0 {
		errs = append(errs, FieldError{p + ".urls", "missing: one or more Alertmanager base URLs, e.g. [\"http://127.0.0.1:9093\"]"})
	}
	seen := map[string]int{}
	for i, raw := range c.URLs {
		up := fmt.Sprintf("%s.urls[%d]", p, i)
		if _, err := checkHTTPURL(raw); err != nil {
			errs = append(errs, FieldError{up, err.Error()})
			continue
		}
		if j, dup := seen[raw]; dup {
			errs = append(errs, FieldError{up, fmt.Sprintf("same peer as urls[%d]", j)})
		}
		seen[raw] = i
	}
	if c.Timeout < 0 {
		errs = append(errs, FieldError{p + ".timeout", fmt.Sprintf("%s: must be positive", time.Duration(c.Timeout))})
	}
	switch {
	case c.Resend < 0:
		errs = append(errs, FieldError{p + ".resend", fmt.Sprintf("%s: must be positive", time.Duration(c.Resend))})
	case c.Resend > 0 && time.Duration(c.Resend) < time.Second:
		errs = append(errs, FieldError{p + ".resend", fmt.Sprintf("%s: at least 1s", time.Duration(c.Resend))})
	}
	if c.ExternalURL != "" {
		if _, err := checkHTTPURL(c.ExternalURL); err != nil {
			errs = append(errs, FieldError{p + ".external_url", err.Error()})
		}
	}
	keys := make([]string, 0, len(c.Labels))
	for k := range c.Labels {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		lp := p + ".labels." + k
		switch {
		case !validLabelName(k):
			errs = append(errs, FieldError{lp, fmt.Sprintf("%q is not a label name (letters, digits and '_', not starting with a digit or \"__\")", k)})
		case amOwnLabels[k]:
			errs = append(errs, FieldError{lp, "set by the notifier from the alarm; choose another name"})
		case c.Labels[k] == "":
			errs = append(errs, FieldError{lp, "an empty label value is the same as no label"})
		}
	}
	return errs
}

// validLabelName is the classic Prometheus label name, without the
// reserved "__" prefix.
func validLabelName(s string) bool {
	if s == "" || strings.HasPrefix(s, "__") {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c == '_' || i > 0 && c >= '0' && c <= '9' {
			continue
		}
		return false
	}
	return true
}

// amAlert is a postableAlert of the Alertmanager v2 API.
type amAlert struct {
	Labels       map[string]string `json:"labels"`
	Annotations  map[string]string `json:"annotations,omitempty"`
	StartsAt     time.Time         `json:"startsAt"`
	EndsAt       time.Time         `json:"endsAt"`
	GeneratorURL string            `json:"generatorURL,omitempty"`
}

// Alertmanager posts alarms to Alertmanager's v2 API. An alarm fires from
// the moment it is active until it is cleared: acknowledging it does not
// resolve it (silences are Alertmanager's own business). A delayed alarm
// is not posted; one cleared before it fired is not posted either.
//
// A firing alert is posted with its end AlertmanagerHold ahead, and
// refreshed by Run with the open alarms; nothing is posted when the daemon
// stops. Every alert carries the labels severity (the alarm's level) and
// the configured site labels, and the annotation value_text, its value
// with its unit.
type Alertmanager struct {
	cfg     AlertmanagerConfig
	client  *http.Client
	peers   []string // full endpoint URLs
	timeout time.Duration
	resend  time.Duration
	now     func() time.Time

	// mu serialises posts, so that a resend never overtakes a resolve
	// posted after it; sent is the label set last posted per alarm, so a
	// change of level resolves the superseded series at once.
	mu   sync.Mutex
	sent map[string]map[string]string

	pmu     sync.Mutex
	peerErr map[string]string
}

// NewAlertmanager checks the configuration and returns the notifier.
// client nil gives one that follows no redirects.
func NewAlertmanager(cfg AlertmanagerConfig, client *http.Client) (*Alertmanager, error) {
	cfg = cfg.withDefaults()
	if err := checkNotifierName(cfg.Name); err != nil {
		return nil, fmt.Errorf("%w: alertmanager name: %v", ErrNotifyConfig, err)
	}
	if errs := cfg.validate("alertmanager " + cfg.Name); len(errs) > 0 {
		return nil, fmt.Errorf("%w: %s", ErrNotifyConfig, errs[0])
	}
	if client == nil {
		client = noRedirectClient()
	}
	a := &Alertmanager{
		cfg: cfg, client: client,
		timeout: time.Duration(cfg.Timeout), resend: time.Duration(cfg.Resend),
		now:  time.Now,
		sent: map[string]map[string]string{}, peerErr: map[string]string{},
	}
	if a.timeout == 0 {
		a.timeout = DefaultNotifyTimeout
	}
	if a.resend == 0 {
		a.resend = DefaultResend
	}
	for _, raw := range cfg.URLs {
		ep, err := url.JoinPath(raw, "api/v2/alerts")
		if err != nil {
			return nil, fmt.Errorf("%w: alertmanager %s: %v", ErrNotifyConfig, cfg.Name, err)
		}
		a.peers = append(a.peers, ep)
	}
	return a, nil
}

// Name is the configured name.
func (a *Alertmanager) Name() string { return a.cfg.Name }

// Notify posts the alarm as it is after the transition: firing while
// active or acknowledged, resolved (endsAt the time it cleared) once
// cleared. It succeeds when at least one peer accepted; the peers that
// did not show in Degraded and catch up at the next resend.
func (a *Alertmanager) Notify(ctx context.Context, t Transition) error {
	al := t.Alarm
	if al.ID == "" {
		al.ID = t.AlarmID
	}
	if al.State == "" {
		al.State = t.To
	}
	var firing bool
	switch al.State {
	case StateActive, StateAcknowledged:
		firing = true
	case StateCleared:
		if al.ActiveSince == nil {
			return nil // never fired, nothing to resolve
		}
	default:
		return nil // delayed: its delay is still running
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	now := a.now()
	end := now.Add(AlertmanagerHold)
	if !firing {
		end = t.Time
		if al.ClearedAt != nil {
			end = *al.ClearedAt
		}
	}
	batch, labels := a.alerts(al, end, now)
	if err := a.post(ctx, batch); err != nil {
		return err
	}
	if firing {
		a.sent[al.ID] = labels
	} else {
		delete(a.sent, al.ID)
	}
	return nil
}

// Run posts the firing alarms among active() every Resend, at once first,
// until ctx is done. A failed resend shows in Degraded and is not retried
// before the next period. active is called under the lock that orders
// posts, so a resend never repeats an alarm whose clear was posted.
func (a *Alertmanager) Run(ctx context.Context, active func() []Alarm) error {
	if active == nil {
		return fmt.Errorf("%w: alertmanager %s: Run needs the source of open alarms", ErrNotifyConfig, a.cfg.Name)
	}
	tick := time.NewTicker(a.resend)
	defer tick.Stop()
	for {
		_ = a.resendNow(ctx, active)
		select {
		case <-ctx.Done():
			return nil
		case <-tick.C:
		}
	}
}

// resendNow posts the firing (active or acknowledged) alarms among
// active() in one request per peer.
func (a *Alertmanager) resendNow(ctx context.Context, active func() []Alarm) error {
	a.mu.Lock()
	defer a.mu.Unlock()
	open := active()
	now := a.now()
	end := now.Add(AlertmanagerHold)
	var batch []amAlert
	sets := map[string]map[string]string{}
	for _, al := range open {
		if al.State != StateActive && al.State != StateAcknowledged {
			continue
		}
		b, labels := a.alerts(al, end, now)
		batch = append(batch, b...)
		sets[al.ID] = labels
	}
	if len(batch) == 0 {
		return nil
	}
	if err := a.post(ctx, batch); err != nil {
		return err
	}
	maps.Copy(a.sent, sets)
	return nil
}

// Degraded names the peers whose last post failed, or is "" when every
// peer took the last post.
func (a *Alertmanager) Degraded() string {
	a.pmu.Lock()
	defer a.pmu.Unlock()
	if len(a.peerErr) == 0 {
		return ""
	}
	var parts []string
	for _, p := range a.peers {
		if e, ok := a.peerErr[p]; ok {
			parts = append(parts, e)
		}
	}
	return strings.Join(parts, "; ")
}

// alerts is the alarm as postable alerts ending at end: its own, and a
// resolve for the label set posted before if that has changed. The caller
// holds mu.
func (a *Alertmanager) alerts(al Alarm, end, now time.Time) ([]amAlert, map[string]string) {
	labels := map[string]string{}
	maps.Copy(labels, a.cfg.Labels)
	labels["alertname"] = "cleanmon_" + al.Kind
	labels["severity"] = al.Level
	for k, v := range map[string]string{"zone": al.Zone, "kind": al.Kind, "level": al.Level, "location": al.Location, "counter": al.Counter, "sensor": al.Sensor} {
		if v != "" {
			labels[k] = v
		}
	}
	if al.SizeUM != nil {
		labels["size_um"] = classify.FormatSize(*al.SizeUM)
	}
	start := al.Since
	if al.ActiveSince != nil {
		start = *al.ActiveSince
	}
	ann := map[string]string{"alarm_id": al.ID, "state": al.State, "summary": al.Message}
	if al.Message == "" {
		ann["summary"] = fmt.Sprintf("%s %s in zone %s", al.Kind, al.Level, al.Zone)
	}
	if al.Unit != "" {
		ann["value"] = strconv.FormatFloat(al.Value, 'g', -1, 64)
		ann["threshold"] = strconv.FormatFloat(al.Threshold, 'g', -1, 64)
		ann["unit"] = al.Unit
		ann["value_text"] = al.ValueText()
	}
	if al.AcknowledgedBy != "" {
		ann["acknowledged_by"] = al.AcknowledgedBy
	}
	if al.Comment != "" {
		ann["comment"] = al.Comment
	}
	if al.Latched && al.ConditionGone {
		ann["condition_gone"] = "true"
	}
	out := []amAlert{{Labels: labels, Annotations: ann, StartsAt: start.UTC(), EndsAt: end.UTC(), GeneratorURL: a.generatorURL(al)}}
	if prev, ok := a.sent[al.ID]; ok && !maps.Equal(prev, labels) {
		out = append(out, amAlert{Labels: prev, Annotations: ann, StartsAt: start.UTC(), EndsAt: now.UTC(), GeneratorURL: out[0].GeneratorURL})
	}
	return out, labels
}

func (a *Alertmanager) generatorURL(al Alarm) string {
	if a.cfg.ExternalURL == "" {
		return ""
	}
	var u string
	var err error
	if al.Zone != "" {
		u, err = url.JoinPath(a.cfg.ExternalURL, "api/v1/zones", al.Zone)
	} else {
		u, err = url.JoinPath(a.cfg.ExternalURL, "api/v1/alarms")
	}
	if err != nil {
		return ""
	}
	return u
}

// post sends one batch to every peer at once and succeeds when one took
// it. The caller holds mu.
func (a *Alertmanager) post(ctx context.Context, batch []amAlert) error {
	body, err := json.Marshal(batch)
	if err != nil {
		return fmt.Errorf("%w: encoding alerts: %v", ErrRejected, err)
	}
	errs := make([]error, len(a.peers))
	var wg sync.WaitGroup
	for i, ep := range a.peers {
		wg.Go(func() {
			if err := a.postPeer(ctx, ep, body); err != nil {
				errs[i] = fmt.Errorf("peer %s: %w", peerName(ep), err)
			}
		})
	}
	wg.Wait()

	ok, rejected := 0, 0
	a.pmu.Lock()
	for i, ep := range a.peers {
		switch {
		case errs[i] == nil:
			ok++
			delete(a.peerErr, ep)
		default:
			if errors.Is(errs[i], ErrRejected) {
				rejected++
			}
			a.peerErr[ep] = errs[i].Error()
		}
	}
	a.pmu.Unlock()
	if ok > 0 {
		return nil
	}
	joined := errors.Join(errs...)
	if rejected == len(a.peers) {
		return fmt.Errorf("%w: every peer refused the alerts: %v", ErrRejected, strings.ReplaceAll(joined.Error(), "\n", "; "))
	}
	return fmt.Errorf("%w: no peer took the alerts: %v", ErrDelivery, strings.ReplaceAll(joined.Error(), "\n", "; "))
}

func (a *Alertmanager) postPeer(ctx context.Context, ep string, body []byte) error {
	ctx, cancel := context.WithTimeout(ctx, a.timeout)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, ep, bytes.NewReader(body))
	if err != nil {
		return fmt.Errorf("%w: %v", ErrRejected, err)
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "cleanmon")
	resp, err := a.client.Do(req)
	if err != nil {
		return fmt.Errorf("%w: %v", ErrDelivery, redactURLError(err))
	}
	defer resp.Body.Close()
	return httpStatusError(resp, readSnippet(resp.Body), a.now())
}

// peerName is how errors name a peer: its host, without credentials.
func peerName(ep string) string {
	if u, err := url.Parse(ep); err == nil && u.Host != "" {
		return u.Host
	}
	return ep
}
