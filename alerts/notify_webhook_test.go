package alerts

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"io"
	"log/slog"
	"math"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// hookReceiver is a webhook receiver as a site would write one: it checks
// the signature by recomputing the HMAC over the exact body, fails the
// first failFirst requests with 503, and accepts each delivery key once.
type hookReceiver struct {
	t         *testing.T
	secret    string
	failFirst int
	// reject answers 400 for these keys, always.
	reject map[string]bool
	// stallFirstAccept accepts the first delivery and then holds the
	// answer until the sender gives up, as a receiver whose reply is lost.
	stallFirstAccept bool

	mu       sync.Mutex
	requests int
	badSig   int
	accepted map[string]int
	order    []string
	dupes    int
	bodies   [][]byte
}

func newHookReceiver(t *testing.T, secret string) *hookReceiver {
	return &hookReceiver{t: t, secret: secret, accepted: map[string]int{}, reject: map[string]bool{}}
}

func (h *hookReceiver) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	body, err := io.ReadAll(r.Body)
	if err != nil {
		http.Error(w, err.Error(), http.StatusBadRequest)
		return
	}
	m := hmac.New(sha256.New, []byte(h.secret))
	m.Write(body)
	want := "sha256=" + hex.EncodeToString(m.Sum(nil))
	key := r.Header.Get(DeliveryHeader)

	h.mu.Lock()
	h.requests++
	n := h.requests
	h.bodies = append(h.bodies, body)
	if !hmac.Equal([]byte(r.Header.Get(SignatureHeader)), []byte(want)) {
		h.badSig++
		h.mu.Unlock()
		http.Error(w, "bad signature", http.StatusUnauthorized)
		return
	}
	if n <= h.failFirst {
		h.mu.Unlock()
		http.Error(w, "receiver busy", http.StatusServiceUnavailable)
		return
	}
	if h.reject[key] {
		h.mu.Unlock()
		http.Error(w, "unknown zone in payload", http.StatusBadRequest)
		return
	}
	if h.accepted[key] > 0 {
		h.dupes++
		h.mu.Unlock()
		w.WriteHeader(http.StatusOK) // already have it: acknowledge, do not act twice
		return
	}
	h.accepted[key]++
	h.order = append(h.order, key)
	stall := h.stallFirstAccept && len(h.order) == 1
	h.mu.Unlock()
	if stall {
		select {
		case <-r.Context().Done():
		case <-time.After(5 * time.Second):
		}
		return
	}
	w.WriteHeader(http.StatusNoContent)
}

func (h *hookReceiver) snapshot() (requests, badSig, dupes int, order []string, accepted map[string]int) {
	h.mu.Lock()
	defer h.mu.Unlock()
	acc := map[string]int{}
	for k, v := range h.accepted {
		acc[k] = v
	}
	return h.requests, h.badSig, h.dupes, append([]string(nil), h.order...), acc
}

func TestWebhookSignsExactBody(t *testing.T) {
	const secret = "s3cret-veldmark"
	var got struct {
		sig, delivery, ctype, custom string
		body                         []byte
	}
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		got.body, _ = io.ReadAll(r.Body)
		got.sig = r.Header.Get(SignatureHeader)
		got.delivery = r.Header.Get(DeliveryHeader)
		got.ctype = r.Header.Get("Content-Type")
		got.custom = r.Header.Get("X-Site")
		w.WriteHeader(http.StatusOK)
	}))
	defer srv.Close()

	w, err := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL + "/hook", Secret: secret, Headers: map[string]string{"X-Site": "veldmark-c"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	tr := ntTransitions(1)[0]
	if err := w.Notify(context.Background(), tr); err != nil {
		t.Fatalf("Notify: %v", err)
	}

	m := hmac.New(sha256.New, []byte(secret))
	m.Write(got.body)
	if want := "sha256=" + hex.EncodeToString(m.Sum(nil)); got.sig != want {
		t.Errorf("signature %q, recomputed over the body %q", got.sig, want)
	}
	other := hmac.New(sha256.New, []byte("another key"))
	other.Write(got.body)
	if got.sig == "sha256="+hex.EncodeToString(other.Sum(nil)) {
		t.Errorf("signature does not depend on the secret")
	}
	if got.delivery != tr.Key {
		t.Errorf("%s = %q, want the transition key %q", DeliveryHeader, got.delivery, tr.Key)
	}
	if got.ctype != "application/json" || got.custom != "veldmark-c" {
		t.Errorf("Content-Type %q, X-Site %q", got.ctype, got.custom)
	}
	var msg WebhookMessage
	if err := json.Unmarshal(got.body, &msg); err != nil {
		t.Fatalf("body is not JSON: %v", err)
	}
	if msg.Version != WebhookMessageVersion || msg.Key != tr.Key || msg.To != StateActive || msg.Alarm.Zone != "assembly" || msg.Alarm.SizeUM == nil || *msg.Alarm.SizeUM != 0.5 {
		t.Errorf("body decoded to %+v", msg)
	}
	var raw map[string]any
	_ = json.Unmarshal(got.body, &raw)
	for _, k := range []string{"version", "key", "alarm_id", "time", "from", "to", "alarm"} {
		if _, ok := raw[k]; !ok {
			t.Errorf("body lacks %q: %s", k, got.body)
		}
	}
}

func TestWebhookAnswers(t *testing.T) {
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		code, _ := strconv.Atoi(strings.TrimPrefix(r.URL.Path, "/status/"))
		if ra := r.URL.Query().Get("retry_after"); ra != "" {
			w.Header().Set("Retry-After", ra)
		}
		if code == http.StatusMovedPermanently {
			w.Header().Set("Location", "/elsewhere")
		}
		w.WriteHeader(code)
		_, _ = io.WriteString(w, "answer body\nwith lines")
	}))
	defer srv.Close()
	dead := httptest.NewServer(http.NotFoundHandler())
	deadURL := dead.URL
	dead.Close()

	cases := []struct {
		name       string
		url        string
		want       error // nil, ErrDelivery or ErrRejected
		retryAfter time.Duration
	}{
		{"200 delivered", srv.URL + "/status/200", nil, 0},
		{"204 delivered", srv.URL + "/status/204", nil, 0},
		{"500 retried", srv.URL + "/status/500", ErrDelivery, 0},
		{"503 with Retry-After", srv.URL + "/status/503?retry_after=7", ErrDelivery, 7 * time.Second},
		{"429 throttled", srv.URL + "/status/429?retry_after=2", ErrDelivery, 2 * time.Second},
		{"408 timeout", srv.URL + "/status/408", ErrDelivery, 0},
		{"400 refused", srv.URL + "/status/400", ErrRejected, 0},
		{"401 refused", srv.URL + "/status/401", ErrRejected, 0},
		{"404 refused", srv.URL + "/status/404", ErrRejected, 0},
		{"301 not followed", srv.URL + "/status/301", ErrRejected, 0},
		{"connection refused", deadURL + "/hook", ErrDelivery, 0},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			w, err := NewWebhook(WebhookConfig{Name: "h", URL: tc.url, Secret: "k"}, nil)
			if err != nil {
				t.Fatal(err)
			}
			err = w.Notify(context.Background(), ntTransitions(1)[0])
			switch {
			case tc.want == nil && err != nil:
				t.Fatalf("want delivered, got %v", err)
			case tc.want != nil && !errors.Is(err, tc.want):
				t.Fatalf("want %v, got %v", tc.want, err)
			}
			if tc.want == ErrDelivery && errors.Is(err, ErrRejected) || tc.want == ErrRejected && errors.Is(err, ErrDelivery) {
				t.Errorf("%v is both worth repeating and refused", err)
			}
			var ra interface{ RetryAfter() time.Duration }
			gotRA := time.Duration(0)
			if errors.As(err, &ra) {
				gotRA = ra.RetryAfter()
			}
			if gotRA != tc.retryAfter {
				t.Errorf("Retry-After %s, want %s", gotRA, tc.retryAfter)
			}
			if err != nil && strings.Contains(err.Error(), "\n") {
				t.Errorf("error spans lines: %q", err)
			}
		})
	}
}

func TestWebhookSendsNonFiniteValuesAsZero(t *testing.T) {
	rcv := newHookReceiver(t, "k")
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	w, _ := NewWebhook(WebhookConfig{Name: "h", URL: srv.URL, Secret: "k"}, nil)
	tr := ntTransitions(1)[0]
	tr.Alarm.Value, tr.Alarm.Threshold = math.NaN(), math.Inf(1)
	if err := w.Notify(context.Background(), tr); err != nil {
		t.Fatalf("Notify: %v", err)
	}
	rcv.mu.Lock()
	defer rcv.mu.Unlock()
	var msg WebhookMessage
	if len(rcv.bodies) != 1 || json.Unmarshal(rcv.bodies[0], &msg) != nil || msg.Alarm.Value != 0 || msg.Alarm.Threshold != 0 || msg.Alarm.Message != tr.Alarm.Message {
		t.Errorf("bodies %s", rcv.bodies)
	}
}

func TestWebhookKeepsCredentialsOutOfErrors(t *testing.T) {
	dead := httptest.NewServer(http.NotFoundHandler())
	u := strings.Replace(dead.URL, "http://", "http://ops:hunter2@", 1)
	dead.Close()
	w, err := NewWebhook(WebhookConfig{Name: "h", URL: u, Secret: "k"}, nil)
	if err != nil {
		t.Fatal(err)
	}
	err = w.Notify(context.Background(), ntTransitions(1)[0])
	if err == nil || strings.Contains(err.Error(), "hunter2") {
		t.Fatalf("error %v shows the password", err)
	}
}

func TestWebhookTimeout(t *testing.T) {
	release := make(chan struct{})
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		select {
		case <-release:
		case <-r.Context().Done():
		}
	}))
	defer srv.Close()
	defer close(release)
	w, err := NewWebhook(WebhookConfig{Name: "slow", URL: srv.URL, Secret: "k", Timeout: model.Duration(50 * time.Millisecond)}, nil)
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- w.Notify(context.Background(), ntTransitions(1)[0]) }()
	select {
	case err := <-done:
		if !errors.Is(err, ErrDelivery) {
			t.Fatalf("want ErrDelivery after the timeout, got %v", err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Notify ignored its timeout")
	}
}

func TestWebhookConfigErrors(t *testing.T) {
	ok := WebhookConfig{Name: "facilities", URL: "https://hooks.veldmark.example/cleanmon", Secret: "k"}
	cases := []struct {
		name   string
		edit   func(*WebhookConfig)
		path   string
		reason string
	}{
		{"no url", func(c *WebhookConfig) { c.URL = "" }, "webhooks[0].url", "missing"},
		{"ftp url", func(c *WebhookConfig) { c.URL = "ftp://x/y" }, "webhooks[0].url", "http"},
		{"no host", func(c *WebhookConfig) { c.URL = "http:///path" }, "webhooks[0].url", "no host"},
		{"no secret", func(c *WebhookConfig) { c.Secret = "" }, "webhooks[0].secret", "HMAC"},
		{"negative timeout", func(c *WebhookConfig) { c.Timeout = model.Duration(-time.Second) }, "webhooks[0].timeout", "positive"},
		{"bad header name", func(c *WebhookConfig) { c.Headers = map[string]string{"X Site": "a"} }, "webhooks[0].headers.X Site", "header name"},
		{"reserved header", func(c *WebhookConfig) { c.Headers = map[string]string{"x-cleanmon-signature": "a"} }, "webhooks[0].headers.x-cleanmon-signature", "may not be replaced"},
		{"header line break", func(c *WebhookConfig) { c.Headers = map[string]string{"X-Site": "a\r\nX-Evil: 1"} }, "webhooks[0].headers.X-Site", "line breaks"},
		{"bad name", func(c *WebhookConfig) { c.Name = "two words" }, "webhooks[0].name", "letters"},
		{"no name", func(c *WebhookConfig) { c.Name = "" }, "webhooks[0].name", "missing"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := ok
			tc.edit(&c)
			errs := ValidateNotify(NotifyConfig{Webhooks: []WebhookConfig{c}})
			if len(errs) != 1 {
				t.Fatalf("want one problem, got %v", errs)
			}
			if want := "notifications." + tc.path; errs[0].Path != want || !strings.Contains(errs[0].Msg, tc.reason) {
				t.Errorf("got %q: %q, want path %q and a reason with %q", errs[0].Path, errs[0].Msg, want, tc.reason)
			}
			if _, err := NewWebhook(c, nil); !errors.Is(err, ErrNotifyConfig) {
				t.Errorf("NewWebhook accepted it: %v", err)
			}
			if ns, err := BuildNotifiers(NotifyConfig{Webhooks: []WebhookConfig{c}}, nil, nil); !errors.Is(err, ErrNotifyConfig) || ns != nil {
				t.Errorf("BuildNotifiers: %v, %v", ns, err)
			}
		})
	}
	if errs := ValidateNotify(NotifyConfig{Webhooks: []WebhookConfig{ok}}); len(errs) != 0 {
		t.Errorf("a good webhook reported %v", errs)
	}
}

func TestNotifyConfigSection(t *testing.T) {
	hook := WebhookConfig{Name: "facilities", URL: "http://127.0.0.1:1/h", Secret: "k"}
	am := AlertmanagerConfig{URLs: []string{"http://127.0.0.1:9093"}}
	cases := []struct {
		name  string
		cfg   NotifyConfig
		paths []string
	}{
		{"good", NotifyConfig{Log: true, Webhooks: []WebhookConfig{hook}, Alertmanagers: []AlertmanagerConfig{am}}, nil},
		{"name twice", NotifyConfig{Webhooks: []WebhookConfig{hook, hook}}, []string{"notifications.webhooks[1].name"}},
		{"webhook named log", NotifyConfig{Log: true, Webhooks: []WebhookConfig{{Name: "log", URL: hook.URL, Secret: "k"}}}, []string{"notifications.webhooks[0].name"}},
		{"two default alertmanagers", NotifyConfig{Alertmanagers: []AlertmanagerConfig{am, am}}, []string{"notifications.alertmanagers[1].name"}},
		{"retry max below base", NotifyConfig{Retry: RetryConfig{Base: model.Duration(time.Minute), Max: model.Duration(time.Second)}}, []string{"notifications.retry.max"}},
		{"negative retry", NotifyConfig{Retry: RetryConfig{Base: model.Duration(-1)}}, []string{"notifications.retry.base"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			errs := ValidateNotify(tc.cfg)
			var got []string
			for _, e := range errs {
				got = append(got, e.Path)
			}
			if strings.Join(got, ",") != strings.Join(tc.paths, ",") {
				t.Fatalf("problems at %v, want %v (%v)", got, tc.paths, errs)
			}
			ns, err := BuildNotifiers(tc.cfg, nil, nil)
			if (err == nil) != (len(tc.paths) == 0) {
				t.Fatalf("BuildNotifiers: %v", err)
			}
			if err == nil {
				var names, beats, checkpoints []string
				for _, n := range ns.All {
					names = append(names, n.Name())
				}
				for _, n := range ns.Heartbeats {
					beats = append(beats, n.Name())
				}
				for _, n := range ns.Checkpoints {
					checkpoints = append(checkpoints, n.Name())
				}
				if strings.Join(names, ",") != "log,facilities,alertmanager" {
					t.Errorf("built %v", names)
				}
				// The log notifier carries transitions only; both HTTP
				// kinds carry the heartbeat and checkpoints; only an
				// Alertmanager must resend what still fires.
				if strings.Join(beats, ",") != "facilities,alertmanager" || strings.Join(checkpoints, ",") != "facilities,alertmanager" || len(ns.Resenders) != 1 {
					t.Errorf("heartbeats %v, checkpoints %v, %d resenders", beats, checkpoints, len(ns.Resenders))
				}
			}
		})
	}
}

func TestParseRetryAfter(t *testing.T) {
	now := ntT0
	cases := []struct {
		in   string
		want time.Duration
	}{
		{"", 0},
		{"3", 3 * time.Second},
		{" 120 ", 2 * time.Minute},
		{"-4", 0},
		{"soon", 0},
		{now.Add(90 * time.Second).Format(http.TimeFormat), 90 * time.Second},
		{now.Add(-time.Hour).Format(http.TimeFormat), 0},
	}
	for _, tc := range cases {
		if got := parseRetryAfter(tc.in, now); got != tc.want {
			t.Errorf("parseRetryAfter(%q) = %s, want %s", tc.in, got, tc.want)
		}
	}
}

func TestLogNotifier(t *testing.T) {
	var buf strings.Builder
	l := slog.New(slog.NewJSONHandler(&buf, nil))
	n := NewLogNotifier(l)
	tr := ntTransitions(1)[0]
	if err := n.Notify(context.Background(), tr); err != nil || n.Name() != LogNotifierName {
		t.Fatalf("Notify: %v, name %q", err, n.Name())
	}
	var rec map[string]any
	if err := json.Unmarshal([]byte(buf.String()), &rec); err != nil {
		t.Fatalf("log line %q: %v", buf.String(), err)
	}
	want := map[string]any{"level": "WARN", "key": tr.Key, "zone": "assembly", "kind": KindExcursion, "to": StateActive, "location": "pc-asm-1", "size_um": 0.5}
	for k, v := range want {
		if rec[k] != v {
			t.Errorf("log %s = %v, want %v", k, rec[k], v)
		}
	}
}
