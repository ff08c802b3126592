package alerts

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

func TestBackoffGrowsAndCaps(t *testing.T) {
	cases := []struct {
		name      string
		base, max time.Duration
		r         float64
		want      []time.Duration // for failures 1, 2, 3, ...
	}{
		{"low draw is half the ceiling", time.Second, 8 * time.Second, 0,
			[]time.Duration{500 * time.Millisecond, time.Second, 2 * time.Second, 4 * time.Second, 4 * time.Second, 4 * time.Second}},
		{"mid draw", time.Second, 8 * time.Second, 0.5,
			[]time.Duration{750 * time.Millisecond, 1500 * time.Millisecond, 3 * time.Second, 6 * time.Second, 6 * time.Second}},
		{"cap not a power of two", 2 * time.Second, 5 * time.Second, 0,
			[]time.Duration{time.Second, 2 * time.Second, 2500 * time.Millisecond, 2500 * time.Millisecond}},
		{"out-of-range draw taken as 0", time.Second, time.Minute, 1.5,
			[]time.Duration{500 * time.Millisecond, time.Second}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			o := DispatcherOptions{BaseBackoff: tc.base, MaxBackoff: tc.max, Rand: func() float64 { return tc.r }}.withDefaults()
			for i, want := range tc.want {
				if got := o.backoff(i + 1); got != want {
					t.Errorf("failure %d: %s, want %s", i+1, got, want)
				}
			}
		})
	}
	// Every draw stays within [ceiling/2, ceiling] and never above the cap.
	o := DispatcherOptions{BaseBackoff: time.Second, MaxBackoff: 30 * time.Second}.withDefaults()
	for n := 1; n <= 200; n++ {
		ceil := min(time.Second<<min(n-1, 20), 30*time.Second)
		if got := o.backoff(n); got < ceil/2 || got > ceil {
			t.Fatalf("failure %d: %s outside [%s, %s]", n, got, ceil/2, ceil)
		}
	}
}

// A receiver that fails N times and then works gets every delivery, each
// key accepted exactly once, in the order the transitions happened.
func TestDispatcherRetriesUntilAcceptedOnce(t *testing.T) {
	for _, failFirst := range []int{0, 1, 3, 6} {
		t.Run(fmt.Sprintf("fails %d", failFirst), func(t *testing.T) {
			rcv := newHookReceiver(t, "k")
			rcv.failFirst = failFirst
			srv := httptest.NewServer(rcv)
			defer srv.Close()
			hook, err := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k"}, nil)
			if err != nil {
				t.Fatal(err)
			}
			ob := newNtOutbox()
			ts := ntTransitions(4)
			ob.add("facilities", ts...)
			d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{Poll: 5 * time.Millisecond, BaseBackoff: time.Millisecond, MaxBackoff: 4 * time.Millisecond})
			stop := ntRun(t, d)
			ntWaitFor(t, 10*time.Second, "the outbox to empty", func() bool { return len(ob.left("facilities")) == 0 })
			stop()

			requests, badSig, _, order, accepted := rcv.snapshot()
			var want []string
			for _, tr := range ts {
				want = append(want, tr.Key)
				if accepted[tr.Key] != 1 {
					t.Errorf("%s accepted %d times", tr.Key, accepted[tr.Key])
				}
			}
			if !slices.Equal(order, want) {
				t.Errorf("accepted in order %v, want %v", order, want)
			}
			if badSig != 0 {
				t.Errorf("%d requests with a bad signature", badSig)
			}
			if requests != failFirst+len(ts) {
				t.Errorf("%d requests, want %d failures + %d deliveries", requests, failFirst, len(ts))
			}
			if got := len(ob.retryCalls()); got != failFirst {
				t.Errorf("%d failed attempts recorded, want %d", got, failFirst)
			}
			h := d.Health()["facilities"]
			if !h.Up || h.Delivered != uint64(len(ts)) || h.Failed != uint64(failFirst) || h.ConsecutiveFailures != 0 || h.Queue != 0 {
				t.Errorf("health %+v", h)
			}
		})
	}
}

// When the answer to an accepted delivery is lost, the delivery goes again
// with the same key and the receiver drops the repeat.
func TestDispatcherLostAnswerIsDeduplicated(t *testing.T) {
	rcv := newHookReceiver(t, "k")
	rcv.stallFirstAccept = true
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	hook, err := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k", Timeout: model.Duration(100 * time.Millisecond)}, nil)
	if err != nil {
		t.Fatal(err)
	}
	ob := newNtOutbox()
	ts := ntTransitions(2)
	ob.add("facilities", ts...)
	d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{Poll: 5 * time.Millisecond, BaseBackoff: time.Millisecond, MaxBackoff: 2 * time.Millisecond})
	stop := ntRun(t, d)
	ntWaitFor(t, 10*time.Second, "the outbox to empty", func() bool { return len(ob.left("facilities")) == 0 })
	stop()
	_, _, dupes, order, accepted := rcv.snapshot()
	if accepted[ts[0].Key] != 1 || accepted[ts[1].Key] != 1 || len(order) != 2 {
		t.Errorf("accepted %v", accepted)
	}
	if dupes < 1 {
		t.Errorf("the first delivery was not sent again after its answer was lost")
	}
	rs := ob.retryCalls()
	if len(rs) == 0 || rs[0].Key != ts[0].Key || !strings.Contains(rs[0].Err, "timed out") && !strings.Contains(rs[0].Err, "deadline") {
		t.Errorf("retries %+v", rs)
	}
}

// The waits after failures grow from the base and stop at the cap, and a
// restarted dispatcher continues from the recorded attempts instead of
// starting over at the base.
func TestDispatcherBackoffSchedule(t *testing.T) {
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		http.Error(w, "down for maintenance", http.StatusServiceUnavailable)
	}))
	defer srv.Close()
	hook, err := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k"}, nil)
	if err != nil {
		t.Fatal(err)
	}
	ob := newNtOutbox()
	ob.add("facilities", ntTransitions(2)...)

	run := func(waits int) *ntClock {
		clk := newNtClock(ntT0)
		if len(ob.retryCalls()) > 0 {
			clk.t = ob.retryCalls()[len(ob.retryCalls())-1].Next
		}
		ctx, cancel := context.WithCancel(context.Background())
		defer cancel()
		clk.onWait = func(n int) {
			if n >= waits {
				cancel()
			}
		}
		d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{
			Now: clk.Now, After: clk.After, Rand: func() float64 { return 0 },
			BaseBackoff: time.Second, MaxBackoff: 8 * time.Second, Poll: time.Hour,
		})
		done := make(chan error, 1)
		go func() { done <- d.Run(ctx) }()
		select {
		case err := <-done:
			if err != nil {
				t.Fatal(err)
			}
		case <-time.After(10 * time.Second):
			t.Fatal("dispatcher did not stop")
		}
		return clk
	}

	clk := run(6)
	want := []time.Duration{500 * time.Millisecond, time.Second, 2 * time.Second, 4 * time.Second, 4 * time.Second, 4 * time.Second}
	if got := clk.recorded(); !slices.Equal(got, want) {
		t.Errorf("waits %v, want %v", got, want)
	}
	rs := ob.retryCalls()
	if len(rs) < len(want) {
		t.Fatalf("%d retries recorded", len(rs))
	}
	at := ntT0
	for i, r := range rs[:len(want)] {
		if r.Attempts != i+1 || r.Key != "alm-1/1/active" || !r.Next.Equal(at.Add(want[i])) || !strings.Contains(r.Err, "503") {
			t.Errorf("retry %d: %+v, want attempt %d at %s", i, r, i+1, at.Add(want[i]))
		}
		at = at.Add(want[i])
	}
	// Only the oldest entry was tried: the one behind it waits its turn.
	if left := ob.left("facilities"); len(left) != 2 || left[1].Attempts != 0 {
		t.Errorf("outbox %+v", left)
	}

	clk = run(1)
	if got := clk.recorded(); len(got) != 1 || got[0] != 4*time.Second {
		t.Errorf("after a restart the first wait is %v, want the cap 4s", got)
	}
}

// A receiver's Retry-After stretches the wait, within the cap.
func TestDispatcherHonoursRetryAfter(t *testing.T) {
	var calls atomic.Int32
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if calls.Add(1) == 1 {
			w.Header().Set("Retry-After", "30")
			http.Error(w, "slow down", http.StatusTooManyRequests)
			return
		}
		w.WriteHeader(http.StatusOK)
	}))
	defer srv.Close()
	hook, _ := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k"}, nil)
	for _, tc := range []struct {
		max, want time.Duration
	}{{time.Minute, 30 * time.Second}, {10 * time.Second, 10 * time.Second}} {
		calls.Store(0)
		ob := newNtOutbox()
		ob.add("facilities", ntTransitions(1)...)
		clk := newNtClock(ntT0)
		d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{Now: clk.Now, After: clk.After, Rand: func() float64 { return 0 }, BaseBackoff: time.Second, MaxBackoff: tc.max, Poll: time.Hour})
		stop := ntRun(t, d)
		ntWaitFor(t, 10*time.Second, "delivery", func() bool { return len(ob.left("facilities")) == 0 })
		stop()
		if w := clk.recorded(); len(w) == 0 || w[0] != tc.want {
			t.Errorf("max %s: waits %v, want first %s", tc.max, w, tc.want)
		}
	}
}

// A receiver that hangs holds up its own notifier only.
func TestDeadReceiverDelaysNoOther(t *testing.T) {
	release := make(chan struct{})
	var hung atomic.Int32
	dead := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		hung.Add(1)
		select {
		case <-release:
		case <-r.Context().Done():
		}
	}))
	defer dead.Close()
	defer close(release)
	rcv := newHookReceiver(t, "k2")
	live := httptest.NewServer(rcv)
	defer live.Close()

	deadHook, _ := NewWebhook(WebhookConfig{Name: "pager", URL: dead.URL, Secret: "k1", Timeout: model.Duration(time.Hour)}, nil)
	liveHook, _ := NewWebhook(WebhookConfig{Name: "facilities", URL: live.URL, Secret: "k2"}, nil)
	ob := newNtOutbox()
	ts := ntTransitions(3)
	ob.add("pager", ts...)
	ob.add("facilities", ts...)
	d := NewDispatcher(ob, []Notifier{deadHook, liveHook}, DispatcherOptions{Poll: 5 * time.Millisecond, AttemptTimeout: time.Hour})
	stop := ntRun(t, d)

	ntWaitFor(t, 10*time.Second, "the live receiver to get all three", func() bool {
		_, _, _, order, _ := rcv.snapshot()
		return len(order) == 3
	})
	// The receiver records a delivery before it answers: the dispatcher
	// counts it once the answer is in.
	ntWaitFor(t, 10*time.Second, "the live notifier to count all three", func() bool {
		return d.Health()["facilities"].Delivered == 3
	})
	// The two notifiers run independently, so the hanging request may reach
	// its receiver after the live one has finished: wait for it, bounded.
	ntWaitFor(t, 10*time.Second, "the dead receiver to hold one request", func() bool {
		return hung.Load() >= 1
	})
	if n := hung.Load(); n != 1 {
		t.Errorf("dead receiver saw %d requests, want the one still hanging", n)
	}
	h := d.Health()
	if h["facilities"].Delivered != 3 || h["facilities"].Queue != 0 {
		t.Errorf("live notifier %+v", h["facilities"])
	}
	if p := h["pager"]; p.Delivered != 0 || p.Queue != 3 || !p.OldestQueued.Equal(ts[0].Time) {
		t.Errorf("hung notifier %+v", p)
	}
	// Shutting down cancels the hanging attempt and records no failure:
	// the entry goes next run as it was.
	stop()
	left := ob.left("pager")
	if len(left) != 3 || left[0].Attempts != 0 {
		t.Errorf("after shutdown the hung queue is %+v", left)
	}
}

// A delivery the receiver refuses keeps being retried on its own schedule
// and never leaves the outbox, while the ones behind it get through.
func TestRejectedDeliveryDoesNotBlockTheQueue(t *testing.T) {
	rcv := newHookReceiver(t, "k")
	ts := ntTransitions(3)
	rcv.reject[ts[0].Key] = true
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	hook, _ := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k"}, nil)
	ob := newNtOutbox()
	ob.add("facilities", ts...)
	d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{Poll: 2 * time.Millisecond, BaseBackoff: time.Millisecond, MaxBackoff: 2 * time.Millisecond})
	stop := ntRun(t, d)
	ntWaitFor(t, 10*time.Second, "the two good deliveries and three refusals", func() bool {
		_, _, _, order, _ := rcv.snapshot()
		return len(order) == 2 && len(ob.retryCalls()) >= 3
	})
	stop()
	left := ob.left("facilities")
	if len(left) != 1 || left[0].Transition.Key != ts[0].Key || left[0].Attempts < 3 || !strings.Contains(left[0].LastError, "400") {
		t.Fatalf("outbox %+v", left)
	}
	h := d.Health()["facilities"]
	if h.Delivered != 2 || h.Rejected < 3 || h.Failed != 0 || h.Queue != 1 {
		t.Errorf("health %+v", h)
	}
}

// After a restart, an entry waiting out its backoff still goes before the
// entries queued behind it.
func TestRestartKeepsOrder(t *testing.T) {
	rcv := newHookReceiver(t, "k")
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	hook, _ := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k"}, nil)
	ts := ntTransitions(2)
	ob := newNtOutbox()
	ob.put(Delivery{ID: 1, Notifier: "facilities", Transition: ts[0], Attempts: 2, NextAttempt: ntT0.Add(5 * time.Second), LastError: "503"})
	ob.put(Delivery{ID: 2, Notifier: "facilities", Transition: ts[1]})
	clk := newNtClock(ntT0)
	d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{Now: clk.Now, After: clk.After, Poll: time.Hour})
	if h := d.Health()["facilities"]; !h.Up || h.Queue != 0 {
		t.Errorf("health before Run %+v", h)
	}
	stop := ntRun(t, d)
	ntWaitFor(t, 10*time.Second, "both deliveries", func() bool { return len(ob.left("facilities")) == 0 })
	stop()
	_, _, _, order, _ := rcv.snapshot()
	if !slices.Equal(order, []string{ts[0].Key, ts[1].Key}) {
		t.Errorf("order %v", order)
	}
	if w := clk.recorded(); len(w) == 0 || w[0] != 5*time.Second {
		t.Errorf("waits %v, want first the 5s left of the backoff", w)
	}
}

// An idle notifier wakes on Kick without waiting for its poll.
func TestKickWakesIdleNotifier(t *testing.T) {
	rcv := newHookReceiver(t, "k")
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	hook, _ := NewWebhook(WebhookConfig{Name: "facilities", URL: srv.URL, Secret: "k"}, nil)
	ob := newNtOutbox()
	d := NewDispatcher(ob, []Notifier{hook}, DispatcherOptions{Poll: time.Hour})
	ntRun(t, d)
	// Give the loop time to reach its idle wait (its first pass finds
	// nothing); were it not there yet, the kick would wait in its buffer.
	time.Sleep(20 * time.Millisecond)
	ob.add("facilities", ntTransitions(1)...)
	d.Kick()
	ntWaitFor(t, 10*time.Second, "the kicked delivery (poll is an hour)", func() bool { return len(ob.left("facilities")) == 0 })
}

// A failing outbox shows in the notifier's health and does not stop it.
func TestOutboxFailureSurfaces(t *testing.T) {
	ob := &flakyOutbox{ntOutbox: newNtOutbox()}
	ob.failDue.Store(true)
	ob.add("log", ntTransitions(1)...)
	d := NewDispatcher(ob, []Notifier{NewLogNotifier(slog.New(slog.DiscardHandler))}, DispatcherOptions{Poll: time.Millisecond, BaseBackoff: time.Millisecond, MaxBackoff: time.Millisecond})
	ntRun(t, d)
	ntWaitFor(t, 5*time.Second, "the failure to show", func() bool {
		h := d.Health()["log"]
		return !h.Up && strings.Contains(h.LastError, "disk full")
	})
	ob.failDue.Store(false)
	ntWaitFor(t, 5*time.Second, "recovery", func() bool { return d.Health()["log"].Up && len(ob.left("log")) == 0 })
}

type flakyOutbox struct {
	*ntOutbox
	failDue atomic.Bool
}

func (o *flakyOutbox) Due(ctx context.Context, n string, now time.Time, limit int) ([]Delivery, error) {
	if o.failDue.Load() {
		return nil, errors.New("disk full")
	}
	return o.ntOutbox.Due(ctx, n, now, limit)
}

func TestDispatcherRunErrors(t *testing.T) {
	log := NewLogNotifier(nil)
	cases := []struct {
		name string
		ob   Outbox
		ns   []Notifier
		want string
	}{
		{"no outbox", nil, []Notifier{log}, "no outbox"},
		{"nil notifier", newNtOutbox(), []Notifier{log, nil}, "notifier 1 is nil"},
		{"name twice", newNtOutbox(), []Notifier{log, NewLogNotifier(nil)}, `notifiers 0 and 1 are both named "log"`},
		{"bad name", newNtOutbox(), []Notifier{namedNotifier("a b")}, "notifier 0"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
			defer cancel()
			err := NewDispatcher(tc.ob, tc.ns, DispatcherOptions{}).Run(ctx)
			if !errors.Is(err, ErrDispatcher) || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("got %v, want ErrDispatcher with %q", err, tc.want)
			}
			if ctx.Err() != nil {
				t.Fatalf("Run waited for the context before refusing")
			}
		})
	}
	d := NewDispatcher(newNtOutbox(), []Notifier{log}, DispatcherOptions{Poll: time.Hour})
	ntRun(t, d)
	ntWaitFor(t, 5*time.Second, "Run to start", d.running.Load)
	if err := d.Run(context.Background()); !errors.Is(err, ErrDispatcher) {
		t.Errorf("second Run: %v", err)
	}
	if got := d.Names(); !slices.Equal(got, []string{"log"}) {
		t.Errorf("Names %v", got)
	}
}

type namedNotifier string

func (n namedNotifier) Name() string                             { return string(n) }
func (n namedNotifier) Notify(context.Context, Transition) error { return nil }

// Deliveries to several notifiers from many transitions, concurrently
// kicked: every one arrives once.
func TestDispatcherManyNotifiersConcurrentKicks(t *testing.T) {
	var mu sync.Mutex
	got := map[string]int{}
	var ns []Notifier
	ob := newNtOutbox()
	ts := ntTransitions(30)
	for i := range 4 {
		name := fmt.Sprintf("n%d", i)
		ns = append(ns, recordingNotifier{name: name, f: func(tr Transition) {
			mu.Lock()
			got[name+" "+tr.Key]++
			mu.Unlock()
		}})
	}
	d := NewDispatcher(ob, ns, DispatcherOptions{Poll: time.Hour, Batch: 7})
	ntRun(t, d)
	var wg sync.WaitGroup
	for i := range 4 {
		wg.Go(func() {
			for _, tr := range ts {
				ob.add(fmt.Sprintf("n%d", i), tr)
				d.Kick()
			}
		})
	}
	wg.Wait()
	d.Kick()
	ntWaitFor(t, 10*time.Second, "all deliveries", func() bool {
		mu.Lock()
		defer mu.Unlock()
		return len(got) == 4*len(ts)
	})
	mu.Lock()
	defer mu.Unlock()
	for k, n := range got {
		if n != 1 {
			t.Errorf("%s delivered %d times", k, n)
		}
	}
}

type recordingNotifier struct {
	name string
	f    func(Transition)
}

func (r recordingNotifier) Name() string { return r.name }
func (r recordingNotifier) Notify(_ context.Context, t Transition) error {
	r.f(t)
	return nil
}

// A notifier that delivers only in part (a cluster member down) is not up,
// and its health says why, though its deliveries succeed.
func TestDegradedNotifierIsNotUp(t *testing.T) {
	degraded := map[string]string{"pager": "peer http://127.0.0.1:9094 unreachable"}
	d := NewDispatcher(newNtOutbox(), []Notifier{NewLogNotifier(slog.New(slog.DiscardHandler)), namedNotifier("pager")},
		DispatcherOptions{Poll: time.Hour, Degraded: func(n string) string { return degraded[n] }})
	h := d.Health()
	if p := h["pager"]; p.Up || p.Degraded != degraded["pager"] {
		t.Errorf("pager health %+v, want down with %q", p, degraded["pager"])
	}
	if l := h["log"]; !l.Up || l.Degraded != "" {
		t.Errorf("log health %+v, want up", l)
	}
}
