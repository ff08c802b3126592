package alerts

import (
	"context"
	"fmt"
	"sort"
	"sync"
	"testing"
	"time"
)

// ntOutbox is a real, if volatile, Outbox: the dispatcher's contract
// without the store (which is tested against the same contract elsewhere).
type ntOutbox struct {
	mu      sync.Mutex
	nextID  uint64
	entries map[uint64]*Delivery
	retries []ntRetry
	done    []uint64
}

type ntRetry struct {
	ID       uint64
	Key      string
	Attempts int
	Next     time.Time
	Err      string
}

func newNtOutbox() *ntOutbox { return &ntOutbox{entries: map[uint64]*Delivery{}} }

// add queues one delivery per transition for the notifier, due at once.
func (o *ntOutbox) add(notifier string, ts ...Transition) []uint64 {
	o.mu.Lock()
	defer o.mu.Unlock()
	var ids []uint64
	for _, t := range ts {
		o.nextID++
		o.entries[o.nextID] = &Delivery{ID: o.nextID, Notifier: notifier, Transition: t}
		ids = append(ids, o.nextID)
	}
	return ids
}

// put stores a delivery as a previous run left it.
func (o *ntOutbox) put(d Delivery) {
	o.mu.Lock()
	defer o.mu.Unlock()
	o.nextID = max(o.nextID, d.ID)
	cp := d
	o.entries[d.ID] = &cp
}

func (o *ntOutbox) Due(ctx context.Context, notifier string, now time.Time, limit int) ([]Delivery, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	o.mu.Lock()
	defer o.mu.Unlock()
	var out []Delivery
	for _, d := range o.entries {
		if d.Notifier == notifier && !d.NextAttempt.After(now) {
			out = append(out, *d)
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].ID < out[j].ID })
	if len(out) > limit {
		out = out[:limit]
	}
	return out, nil
}

func (o *ntOutbox) Done(ctx context.Context, id uint64) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	if _, ok := o.entries[id]; !ok {
		return fmt.Errorf("outbox: no entry %d", id)
	}
	delete(o.entries, id)
	o.done = append(o.done, id)
	return nil
}

func (o *ntOutbox) Retry(ctx context.Context, id uint64, attempts int, next time.Time, lastErr string) error {
	o.mu.Lock()
	defer o.mu.Unlock()
	d, ok := o.entries[id]
	if !ok {
		return fmt.Errorf("outbox: no entry %d", id)
	}
	d.Attempts, d.NextAttempt, d.LastError = attempts, next, lastErr
	o.retries = append(o.retries, ntRetry{ID: id, Key: d.Transition.Key, Attempts: attempts, Next: next, Err: lastErr})
	return nil
}

// left is what is still queued for a notifier, oldest first.
func (o *ntOutbox) left(notifier string) []Delivery {
	ds, _ := o.Due(context.Background(), notifier, time.Now().AddDate(1000, 0, 0), 1<<30)
	return ds
}

func (o *ntOutbox) retryCalls() []ntRetry {
	o.mu.Lock()
	defer o.mu.Unlock()
	return append([]ntRetry(nil), o.retries...)
}

func (o *ntOutbox) Pending(ctx context.Context, notifier string) (int, error) {
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	return len(o.left(notifier)), nil
}

// ntClock is a clock that a dispatcher's waits move forward. Each wait
// also lets a millisecond of real time pass, so an idle loop cannot spin.
type ntClock struct {
	mu    sync.Mutex
	t     time.Time
	waits []time.Duration
	// onWait, if set, is called with the number of waits so far.
	onWait func(n int)
}

func newNtClock(t time.Time) *ntClock { return &ntClock{t: t} }

func (c *ntClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *ntClock) After(d time.Duration) <-chan time.Time {
	c.mu.Lock()
	c.t = c.t.Add(d)
	c.waits = append(c.waits, d)
	n, hook := len(c.waits), c.onWait
	c.mu.Unlock()
	if hook != nil {
		hook(n)
	}
	return time.After(time.Millisecond)
}

func (c *ntClock) recorded() []time.Duration {
	c.mu.Lock()
	defer c.mu.Unlock()
	return append([]time.Duration(nil), c.waits...)
}

// ntT0 is a time at the invented demo site.
var ntT0 = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)

func ntSize(v float64) *float64 { return &v }

// ntAlarm is an excursion at the demo site's assembly room.
func ntAlarm(id, state string) Alarm {
	active := ntT0.Add(30 * time.Second)
	a := Alarm{
		ID: id, Zone: "assembly", Kind: KindExcursion, Level: LevelAlert, State: state,
		Location: "pc-asm-1", Counter: "pc-asm-1", SizeUM: ntSize(0.5),
		Since: ntT0, Value: 120000, Threshold: 100000, Unit: "particles/m³",
		Message: "0.5 µm at pc-asm-1 above the alert level", Updated: ntT0,
	}
	if state != StateDelayed {
		a.ActiveSince = &active
	}
	return a
}

// ntTransitions are n transitions with distinct keys.
func ntTransitions(n int) []Transition {
	out := make([]Transition, n)
	for i := range out {
		id := fmt.Sprintf("alm-%d", i+1)
		out[i] = Transition{
			Key: fmt.Sprintf("%s/1/%s", id, StateActive), AlarmID: id,
			Time: ntT0.Add(time.Duration(i) * time.Second), From: StateDelayed, To: StateActive,
			Alarm: ntAlarm(id, StateActive),
		}
	}
	return out
}

// ntWaitFor polls cond until it holds or the bound passes.
func ntWaitFor(t *testing.T, within time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(within)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("still waiting after %s for %s", within, what)
		}
		time.Sleep(2 * time.Millisecond)
	}
}

// ntRun runs d until the test ends (or stop is called) and checks
// that it returns promptly and cleanly.
func ntRun(t *testing.T, d *Dispatcher) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	errc := make(chan error, 1)
	go func() { errc <- d.Run(ctx) }()
	var once sync.Once
	stop = func() {
		once.Do(func() {
			cancel()
			select {
			case err := <-errc:
				if err != nil {
					t.Errorf("Run: %v", err)
				}
			case <-time.After(10 * time.Second):
				t.Errorf("Run did not return within 10s of cancel")
			}
		})
	}
	t.Cleanup(stop)
	return stop
}
