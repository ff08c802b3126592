package alerts

import (
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"
)

// outboxJournal journals into memory and queues one delivery per named
// notifier per transition, as the store does in one transaction.
type outboxJournal struct {
	*memJournal
	ob *ntOutbox
}

func (j outboxJournal) RecordTransitions(ctx context.Context, ts []Transition, notifiers []string) error {
	if err := j.memJournal.RecordTransitions(ctx, ts, notifiers); err != nil {
		return err
	}
	for _, n := range notifiers {
		j.ob.add(n, ts...)
	}
	return nil
}

// After a restart the judge comes back with its open alarms and the
// receiver gets nothing it already had.
func TestRestartRedeliversNothing(t *testing.T) {
	ctx := context.Background()
	rcv := newHookReceiver(t, "k")
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	hook, err := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k", Labels: map[string]string{"site": "veldmark-c"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	j := outboxJournal{newMemJournal(), newNtOutbox()}
	clk := &engClock{t: engT0}
	cfg := engineConfig()
	cfg.Notifiers = []string{"facilities"}
	run := func(jd *Judge) []string {
		t.Helper()
		d := NewDispatcher(j.ob, []Notifier{hook}, DispatcherOptions{Poll: 5 * time.Millisecond})
		stop := ntRun(t, d)
		ntWaitFor(t, 10*time.Second, "the outbox to empty", func() bool { return len(j.ob.left("facilities")) == 0 })
		time.Sleep(50 * time.Millisecond) // poll periods in which a repeat could go out
		stop()
		_, _, dupes, order, _ := rcv.snapshot()
		if dupes != 0 {
			t.Errorf("%d deliveries repeated", dupes)
		}
		return order
	}
	feed := func(jd *Judge) {
		t.Helper()
		o := reading("pc-asm-1", clk.Now(), 300000, 100)
		if err := jd.Observe(ctx, Input{
			Readings: []CounterReading{{Observation: o, FlowLPM: 28.3}},
			Pressure: []PressureObservation{{Sensor: "dp-asm", Time: clk.Now(), Pa: -3.5}},
		}); err != nil {
			t.Fatal(err)
		}
		if err := jd.Tick(ctx); err != nil {
			t.Fatal(err)
		}
		clk.Advance(10 * time.Second)
	}

	first, err := NewJudge(cfg, j, clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	if err := first.Restore(ctx, nil); err != nil {
		t.Fatal(err)
	}
	feed(first)
	delivered := run(first)
	if len(delivered) < 2 {
		t.Fatalf("delivered %q, want at least the excursion and the reversal", delivered)
	}
	// Every message says its severity, the site and the value with its
	// unit.
	rcv.mu.Lock()
	for _, b := range rcv.bodies {
		var m WebhookMessage
		if err := json.Unmarshal(b, &m); err != nil {
			t.Fatal(err)
		}
		if m.Severity != m.Alarm.Level || m.Labels["site"] != "veldmark-c" || !strings.Contains(m.ValueText, m.Alarm.Unit) || m.ValueText == "" {
			t.Errorf("message %s: severity %q labels %v value %q", m.Key, m.Severity, m.Labels, m.ValueText)
		}
	}
	rcv.mu.Unlock()

	// The daemon restarts: same journal and outbox, the same conditions.
	second, err := NewJudge(cfg, j, clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	if err := second.Restore(ctx, nil); err != nil {
		t.Fatal(err)
	}
	announced := func(jd *Judge) (n int) {
		for _, a := range jd.Alarms(false) {
			if a.State != StateDelayed { // delayed ones live in memory only
				n++
			}
		}
		return n
	}
	if got, want := announced(second), announced(first); got != want || got < 2 {
		t.Errorf("%d open alarms after the restart, had %d", got, want)
	}
	feed(second)
	feed(second)
	if again := run(second); len(again) != len(delivered) {
		t.Errorf("after the restart the receiver has %q, had %q", again, delivered)
	}
}

// Stopping the notifiers posts nothing: the receiver never hears
// "resolved" from a daemon that stops.
func TestStoppingResolvesNothing(t *testing.T) {
	rcv := &amReceiver{}
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	now := time.Now().UTC().Truncate(time.Second)
	am := newTestAlertmanager(t, AlertmanagerConfig{URLs: []string{srv.URL}}, now)
	am.resend = 20 * time.Millisecond
	open := []Alarm{ntAlarm("alm-1", StateActive)}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- am.Run(ctx, func() []Alarm { return open }) }()
	time.Sleep(70 * time.Millisecond)
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	posts, _ := rcv.take()
	if len(posts) == 0 {
		t.Fatal("nothing resent while firing")
	}
	for _, p := range posts {
		for _, a := range p {
			if !a.EndsAt.After(now.Add(AlertmanagerHold - time.Hour)) {
				t.Errorf("a firing alert posted ending %s: it would resolve while the daemon is down", a.EndsAt)
			}
		}
	}
	time.Sleep(50 * time.Millisecond)
	if after, _ := rcv.take(); len(after) != 0 {
		t.Errorf("posted after the stop: %+v", after)
	}
}

// The heartbeat carries the urgency of the worst open alarm, and stops
// with the daemon.
func TestHeartbeat(t *testing.T) {
	cases := []struct {
		name string
		open []Alarm
		want string
		n    int
	}{
		{"nothing open: monitoring lost is still an alert", nil, LevelAlert, 0},
		{"an open alert", []Alarm{{ID: "a", Level: LevelAlert, State: StateActive}}, LevelAlert, 1},
		{"an open action", []Alarm{{ID: "a", Level: LevelAlert, State: StateActive}, {ID: "b", Level: LevelAction, State: StateAcknowledged}}, LevelAction, 2},
		{"a delayed action is not open yet", []Alarm{{ID: "a", Level: LevelAction, State: StateDelayed}}, LevelAlert, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			hb := HeartbeatOf(c.open, engT0, time.Minute)
			if hb.Severity != c.want || hb.OpenAlarms != c.n {
				t.Errorf("heartbeat %+v, want severity %s and %d open", hb, c.want, c.n)
			}
		})
	}

	var mu sync.Mutex
	var beats []WebhookHeartbeat
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		var hb WebhookHeartbeat
		if err := json.NewDecoder(r.Body).Decode(&hb); err != nil || !strings.HasPrefix(r.Header.Get(DeliveryHeader), "heartbeat/") {
			http.Error(w, "bad heartbeat", http.StatusBadRequest)
			return
		}
		mu.Lock()
		beats = append(beats, hb)
		mu.Unlock()
	}))
	defer srv.Close()
	hook, err := NewWebhook(WebhookConfig{Name: "pager", URL: srv.URL, Secret: "k", Labels: map[string]string{"site": "veldmark-c"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	open := []Alarm{{ID: "b", Level: LevelAction, State: StateActive}}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan struct{})
	go func() {
		RunHeartbeat(ctx, []Heartbeater{hook}, 10*time.Millisecond, func() []Alarm { return open }, nil)
		close(stopped)
	}()
	ntWaitFor(t, 5*time.Second, "three heartbeats", func() bool { mu.Lock(); defer mu.Unlock(); return len(beats) >= 3 })
	cancel()
	<-stopped
	mu.Lock()
	n := len(beats)
	for _, b := range beats {
		if b.Severity != LevelAction || b.Labels["site"] != "veldmark-c" || b.Heartbeat.OpenAlarms != 1 {
			t.Errorf("heartbeat %+v", b)
		}
	}
	mu.Unlock()
	time.Sleep(40 * time.Millisecond)
	mu.Lock()
	defer mu.Unlock()
	if len(beats) != n {
		t.Errorf("%d heartbeats after the stop", len(beats)-n)
	}
}

// Against a real Alertmanager, when one is installed: an alarm posted by
// a daemon that then stops stays active there, far beyond any outage,
// while the heartbeat ends within three periods, so a dead-man's switch
// routed on it fires.
func TestRealAlertmanagerKeepsAlarmsOfAStoppedDaemon(t *testing.T) {
	base := startRealAlertmanager(t)
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	a, err := NewAlertmanager(AlertmanagerConfig{URLs: []string{base}, Labels: map[string]string{"site": "veldmark-c"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	al := ntAlarm("alm-1", StateActive)
	al.Level = LevelAction
	now := time.Now().UTC().Truncate(time.Second)
	if err := a.Notify(ctx, Transition{Key: "k1", AlarmID: al.ID, Time: now, To: StateActive, Alarm: al}); err != nil {
		t.Fatal(err)
	}
	if err := a.Beat(ctx, HeartbeatOf([]Alarm{al}, now, time.Minute)); err != nil {
		t.Fatal(err)
	}
	// The daemon stops here: nothing more is posted.
	resp, err := http.Get(base + "/api/v2/alerts")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var got []struct {
		Labels map[string]string `json:"labels"`
		EndsAt time.Time         `json:"endsAt"`
		Status struct {
			State string `json:"state"`
		} `json:"status"`
	}
	if err := json.NewDecoder(resp.Body).Decode(&got); err != nil {
		t.Fatal(err)
	}
	var alarm, beat bool
	for _, g := range got {
		switch g.Labels["alertname"] {
		case "cleanmon_excursion":
			alarm = true
			if g.Status.State != "active" || g.EndsAt.Before(now.Add(30*24*time.Hour)) || g.Labels["severity"] != LevelAction || g.Labels["site"] != "veldmark-c" {
				t.Errorf("alarm in alertmanager %+v: it must stay active far beyond an outage", g)
			}
		case HeartbeatAlertName:
			beat = true
			if g.Labels["severity"] != LevelAction || g.EndsAt.After(now.Add(3*time.Minute+time.Second)) {
				t.Errorf("heartbeat in alertmanager %+v: it must end within three periods", g)
			}
		}
	}
	if !alarm || !beat {
		t.Errorf("alertmanager lists %+v", got)
	}
}
