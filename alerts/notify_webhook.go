package alerts

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"net/textproto"
	"net/url"
	"sort"
	"strings"
	"time"

	"github.com/prometheus/common/model"
)

// Headers of a webhook delivery.
const (
	// SignatureHeader carries "sha256=" and the hex HMAC-SHA256 of the
	// exact request body under the webhook's secret.
	SignatureHeader = "X-Cleanmon-Signature"
	// DeliveryHeader carries the transition's Key: the same on every
	// retry, so a receiver drops what it has already accepted.
	DeliveryHeader = "X-Cleanmon-Delivery"
)

// WebhookMessageVersion is the version of the webhook body.
const WebhookMessageVersion = 1

// WebhookMessage is the JSON body of a webhook delivery: the transition,
// with the alarm as it is after it, and a version for the receiver. An
// alarm is resolved for the receiver only by a transition to cleared:
// nothing is sent when the daemon stops. Severity is the alarm's level,
// Labels the configured site labels, ValueText the value with its unit.
type WebhookMessage struct {
	Version   int               `json:"version"`
	Severity  string            `json:"severity"`
	Labels    map[string]string `json:"labels,omitempty"`
	ValueText string            `json:"value_text,omitempty"`
	Transition
}

// WebhookConfig is one webhook receiver.
type WebhookConfig struct {
	Name string `yaml:"name"`
	URL  string `yaml:"url"`
	// Secret is the HMAC-SHA256 key the receiver verifies the body with.
	Secret string `yaml:"secret"`
	// Timeout bounds one attempt (default DefaultNotifyTimeout).
	Timeout model.Duration `yaml:"timeout"`
	// Headers are sent with every delivery (an Authorization header, say).
	Headers map[string]string `yaml:"headers"`
	// Labels go with every message (site: veldmark-c, say), beside the
	// notifications section's own labels.
	Labels map[string]string `yaml:"labels"`
}

// reservedWebhookHeaders are set by the notifier and may not be replaced.
var reservedWebhookHeaders = map[string]bool{
	"Content-Type": true, "Content-Length": true, "Host": true, "Transfer-Encoding": true,
	SignatureHeader: true, DeliveryHeader: true,
}

func (c WebhookConfig) validate(p string) []FieldError {
	var errs []FieldError
	if _, err := checkHTTPURL(c.URL); err != nil {
		errs = append(errs, FieldError{p + ".url", err.Error()})
	}
	if c.Secret == "" {
		errs = append(errs, FieldError{p + ".secret", "missing: the receiver verifies each body with this HMAC-SHA256 key"})
	}
	if c.Timeout < 0 {
		errs = append(errs, FieldError{p + ".timeout", fmt.Sprintf("%s: must be positive", time.Duration(c.Timeout))})
	}
	keys := make([]string, 0, len(c.Headers))
	for k := range c.Headers {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		hp := p + ".headers." + k
		switch {
		case !validHeaderName(k):
			errs = append(errs, FieldError{hp, fmt.Sprintf("%q is not an HTTP header name", k)})
		case reservedWebhookHeaders[textproto.CanonicalMIMEHeaderKey(k)]:
			errs = append(errs, FieldError{hp, "set by the notifier itself; it may not be replaced"})
		case strings.ContainsAny(c.Headers[k], "\r\n\x00"):
			errs = append(errs, FieldError{hp, "a header value may not hold line breaks or NUL"})
		}
	}
	return errs
}

// validHeaderName is RFC 9110's token.
func validHeaderName(s string) bool {
	if s == "" {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || strings.IndexByte("!#$%&'*+-.^_`|~", c) >= 0 {
			continue
		}
		return false
	}
	return true
}

// Webhook posts each transition as a signed JSON WebhookMessage.
type Webhook struct {
	cfg     WebhookConfig
	client  *http.Client
	timeout time.Duration
	header  http.Header
}

// NewWebhook checks the configuration and returns the notifier. client nil
// gives one that follows no redirects.
func NewWebhook(cfg WebhookConfig, client *http.Client) (*Webhook, error) {
	if err := checkNotifierName(cfg.Name); err != nil {
		return nil, fmt.Errorf("%w: webhook name: %v", ErrNotifyConfig, err)
	}
	if errs := cfg.validate("webhook " + cfg.Name); len(errs) > 0 {
		return nil, fmt.Errorf("%w: %s", ErrNotifyConfig, errs[0])
	}
	if client == nil {
		client = noRedirectClient()
	}
	w := &Webhook{cfg: cfg, client: client, timeout: time.Duration(cfg.Timeout), header: http.Header{}}
	if w.timeout == 0 {
		w.timeout = DefaultNotifyTimeout
	}
	for k, v := range cfg.Headers {
		w.header.Set(k, v)
	}
	return w, nil
}

// Name is the configured name.
func (w *Webhook) Name() string { return w.cfg.Name }

// Notify posts one transition. Any 2xx answer is a delivery.
func (w *Webhook) Notify(ctx context.Context, t Transition) error {
	// JSON has no NaN or infinity; such a value would make the delivery
	// fail for ever, so it goes as 0 beside the unchanged message.
	for _, v := range []*float64{&t.Alarm.Value, &t.Alarm.Threshold, &t.Alarm.Peak} {
		if math.IsNaN(*v) || math.IsInf(*v, 0) {
			*v = 0
		}
	}
	body, err := json.Marshal(WebhookMessage{Version: WebhookMessageVersion, Severity: t.Alarm.Level,
		Labels: w.cfg.Labels, ValueText: t.Alarm.ValueText(), Transition: t})
	if err != nil {
		// Not worth repeating, but never dropped: the dispatcher keeps it.
		return fmt.Errorf("%w: encoding transition %s: %v", ErrRejected, t.Key, err)
	}
	return w.post(ctx, t.Key, body)
}

// post sends one signed body under a delivery key.
func (w *Webhook) post(ctx context.Context, key string, body []byte) error {
	ctx, cancel := context.WithTimeout(ctx, w.timeout)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, w.cfg.URL, bytes.NewReader(body))
	if err != nil {
		return fmt.Errorf("%w: %v", ErrRejected, err)
	}
	req.Header = w.header.Clone()
	req.Header.Set("Content-Type", "application/json")
	if req.Header.Get("User-Agent") == "" {
		req.Header.Set("User-Agent", "cleanmon")
	}
	req.Header.Set(DeliveryHeader, key)
	req.Header.Set(SignatureHeader, "sha256="+webhookSignature([]byte(w.cfg.Secret), body))
	resp, err := w.client.Do(req)
	if err != nil {
		return fmt.Errorf("%w: %v", ErrDelivery, redactURLError(err))
	}
	defer resp.Body.Close()
	snippet := readSnippet(resp.Body)
	return httpStatusError(resp, snippet, time.Now())
}

// webhookSignature is the hex HMAC-SHA256 of body under key.
func webhookSignature(key, body []byte) string {
	m := hmac.New(sha256.New, key)
	m.Write(body)
	return hex.EncodeToString(m.Sum(nil))
}

// readSnippet reads the start of an answer for an error message and
// drains a little more so the connection can be reused.
func readSnippet(r io.Reader) string {
	b, _ := io.ReadAll(io.LimitReader(r, 512))
	_, _ = io.Copy(io.Discard, io.LimitReader(r, 64<<10))
	s := strings.TrimSpace(strings.ToValidUTF8(string(b), "?"))
	return strings.Join(strings.Fields(s), " ")
}

// redactURLError drops the URL from a client error: a webhook URL may
// carry a token in its path, and errors go to logs, /readyz and the
// outbox. The notifier's name says which receiver it was.
func redactURLError(err error) error {
	var ue *url.Error
	if !errors.As(err, &ue) {
		return err
	}
	if ue.Timeout() {
		return fmt.Errorf("timed out: %v", ue.Err)
	}
	return ue.Err
}
