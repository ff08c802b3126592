package alerts

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"sort"
	"sync"
	"sync/atomic"
	"time"
)

// Defaults of a Dispatcher.
const (
	DefaultPoll           = 10 * time.Second
	DefaultBaseBackoff    = 2 * time.Second
	DefaultMaxBackoff     = 5 * time.Minute
	DefaultBatch          = 50
	DefaultAttemptTimeout = time.Minute
)

// ErrDispatcher marks a dispatcher that cannot run as set up.
var ErrDispatcher = errors.New("alerts: dispatcher")

// DispatcherOptions tune a Dispatcher; zero fields take the defaults.
type DispatcherOptions struct {
	// Now is the clock (default time.Now).
	Now func() time.Time
	// Poll is how often an idle notifier looks at the outbox without a
	// Kick (default 10s).
	Poll time.Duration
	// BaseBackoff is the wait after a first failure; it doubles with each
	// further one up to MaxBackoff (defaults 2s and 5m). The wait is drawn
	// between half and all of that, so receivers coming back are not
	// struck by every sender at once.
	BaseBackoff, MaxBackoff time.Duration
	// Batch is how many due deliveries one pass takes (default 50).
	Batch int
	// Degraded, if set, reports a notifier that delivers but only in part
	// (an Alertmanager cluster with a member down): the text, or "" when
	// whole. [NotifierSet.Degraded] is one.
	Degraded func(notifier string) string
	// AttemptTimeout bounds one Notify call (default 1m), beside the
	// notifier's own timeout.
	AttemptTimeout time.Duration
	// Rand draws the jitter in [0, 1) (default math/rand/v2).
	Rand func() float64
	// After is the timer (default time.After); tests pass one that moves
	// their clock.
	After func(time.Duration) <-chan time.Time
	// Logger receives a line when a notifier starts failing and when it
	// recovers (default: none).
	Logger *slog.Logger
}

func (o DispatcherOptions) withDefaults() DispatcherOptions {
	if o.Now == nil {
		o.Now = time.Now
	}
	if o.Poll <= 0 {
		o.Poll = DefaultPoll
	}
	if o.BaseBackoff <= 0 {
		o.BaseBackoff = DefaultBaseBackoff
	}
	if o.MaxBackoff <= 0 {
		o.MaxBackoff = DefaultMaxBackoff
	}
	if o.MaxBackoff < o.BaseBackoff {
		o.MaxBackoff = o.BaseBackoff
	}
	if o.Batch <= 0 {
		o.Batch = DefaultBatch
	}
	if o.AttemptTimeout <= 0 {
		o.AttemptTimeout = DefaultAttemptTimeout
	}
	if o.Rand == nil {
		o.Rand = rand.Float64
	}
	if o.After == nil {
		o.After = time.After
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	return o
}

// backoff is the wait after the n-th consecutive failure (n ≥ 1): the
// ceiling min(Max, Base·2^(n−1)), of which a random half to all is taken.
func (o DispatcherOptions) backoff(n int) time.Duration {
	ceil := o.BaseBackoff
	for i := 1; i < n && ceil < o.MaxBackoff; i++ {
		ceil *= 2
	}
	ceil = min(ceil, o.MaxBackoff)
	r := o.Rand()
	if r < 0 || r >= 1 {
		r = 0
	}
	return ceil/2 + time.Duration(r*float64(ceil-ceil/2))
}

// NotifierHealth is the state of one notifier, for /readyz and metrics.
type NotifierHealth struct {
	Notifier string `json:"notifier"`
	// Up is false while deliveries fail or the notifier reports a degraded
	// receiver; true before the first attempt.
	Up                  bool      `json:"up"`
	ConsecutiveFailures int       `json:"consecutive_failures"`
	LastAttempt         time.Time `json:"last_attempt,omitzero"`
	LastSuccess         time.Time `json:"last_success,omitzero"`
	LastFailure         time.Time `json:"last_failure,omitzero"`
	LastError           string    `json:"last_error,omitempty"`
	// NextAttempt is set while the notifier waits out a backoff.
	NextAttempt time.Time `json:"next_attempt,omitzero"`
	// Queue is the deliveries waiting in the outbox; OldestQueued the time
	// of the oldest transition.
	Queue        int       `json:"queue"`
	OldestQueued time.Time `json:"oldest_queued,omitzero"`
	// Delivered, Failed (worth repeating) and Rejected (refused by the
	// receiver) count attempts since start.
	Delivered uint64 `json:"delivered"`
	Failed    uint64 `json:"failed"`
	Rejected  uint64 `json:"rejected"`
	// Degraded is the notifier's own report of a partial failure (an
	// Alertmanager peer down while another took the alert).
	Degraded string `json:"degraded,omitempty"`
}

// Dispatcher delivers the outbox to the notifiers: one loop per notifier,
// so a dead receiver delays no other. A delivery leaves the outbox only
// when its notifier succeeded; it is never dropped however often it fails.
//
// Within a notifier deliveries go oldest first. A failure worth repeating
// (receiver down, slow, overloaded) holds the whole notifier for the
// backoff and then retries the same delivery first, so a receiver sees an
// alarm fire before it sees it clear. A delivery the receiver refuses
// (ErrRejected) waits on its own backoff and lets the ones behind it pass.
type Dispatcher struct {
	ob      Outbox
	opt     DispatcherOptions
	workers []*dispatchWorker
	running atomic.Bool
}

type dispatchWorker struct {
	n    Notifier
	kick chan struct{}

	mu       sync.Mutex
	h        NotifierHealth
	failures int // consecutive, including ones before a restart
}

// NewDispatcher returns a dispatcher of the outbox to the notifiers.
func NewDispatcher(ob Outbox, ns []Notifier, opt DispatcherOptions) *Dispatcher {
	d := &Dispatcher{ob: ob, opt: opt.withDefaults()}
	for _, n := range ns {
		w := &dispatchWorker{n: n, kick: make(chan struct{}, 1)}
		if n != nil {
			w.h = NotifierHealth{Notifier: n.Name(), Up: true}
		}
		d.workers = append(d.workers, w)
	}
	return d
}

// Names are the notifiers' names, in order: the engine creates one outbox
// entry per name and transition.
func (d *Dispatcher) Names() []string {
	out := make([]string, 0, len(d.workers))
	for _, w := range d.workers {
		if w.n != nil {
			out = append(out, w.n.Name())
		}
	}
	return out
}

// Run delivers until ctx is done, then returns nil. It returns an error at
// once when the dispatcher cannot run: no outbox, a nil notifier, a name
// twice, or Run already running.
func (d *Dispatcher) Run(ctx context.Context) error {
	if d.ob == nil {
		return fmt.Errorf("%w: no outbox", ErrDispatcher)
	}
	seen := map[string]int{}
	for i, w := range d.workers {
		if w.n == nil {
			return fmt.Errorf("%w: notifier %d is nil", ErrDispatcher, i)
		}
		name := w.n.Name()
		if err := checkNotifierName(name); err != nil {
			return fmt.Errorf("%w: notifier %d: %v", ErrDispatcher, i, err)
		}
		if j, dup := seen[name]; dup {
			return fmt.Errorf("%w: notifiers %d and %d are both named %q", ErrDispatcher, j, i, name)
		}
		seen[name] = i
	}
	if !d.running.CompareAndSwap(false, true) {
		return fmt.Errorf("%w: already running", ErrDispatcher)
	}
	defer d.running.Store(false)
	var wg sync.WaitGroup
	for _, w := range d.workers {
		wg.Go(func() { d.loop(ctx, w) })
	}
	wg.Wait()
	return nil
}

// Kick wakes the notifiers that are idle, after new transitions entered
// the outbox. A notifier in backoff stays in it.
func (d *Dispatcher) Kick() {
	for _, w := range d.workers {
		select {
		case w.kick <- struct{}{}:
		default:
		}
	}
}

// Health returns the state of every notifier by name.
func (d *Dispatcher) Health() map[string]NotifierHealth {
	out := make(map[string]NotifierHealth, len(d.workers))
	for _, w := range d.workers {
		if w.n == nil {
			continue
		}
		w.mu.Lock()
		h := w.h
		w.mu.Unlock()
		if d.opt.Degraded != nil {
			h.Degraded = d.opt.Degraded(h.Notifier)
		}
		h.Up = h.ConsecutiveFailures == 0 && h.Degraded == ""
		out[h.Notifier] = h
	}
	return out
}

// HealthList is Health in name order.
func (d *Dispatcher) HealthList() []NotifierHealth {
	m := d.Health()
	out := make([]NotifierHealth, 0, len(m))
	for _, h := range m {
		out = append(out, h)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Notifier < out[j].Notifier })
	return out
}

func (d *Dispatcher) loop(ctx context.Context, w *dispatchWorker) {
	wait, kickable := d.start(ctx, w), false
	for {
		if wait > 0 {
			var kick <-chan struct{}
			if kickable {
				kick = w.kick
			}
			select {
			case <-ctx.Done():
				return
			case <-kick:
			case <-d.opt.After(wait):
			}
		}
		if ctx.Err() != nil {
			return
		}
		wait, kickable = d.pass(ctx, w)
	}
}

// start picks up where a previous run left off: when the oldest entry
// waits out a backoff, the notifier waits with it, so that the entries
// behind it do not overtake it.
func (d *Dispatcher) start(ctx context.Context, w *dispatchWorker) time.Duration {
	now := d.opt.Now()
	head, err := d.ob.Due(ctx, w.n.Name(), farFuture(now), 1)
	d.refreshQueue(ctx, w, now)
	if err != nil || len(head) == 0 || !head[0].NextAttempt.After(now) {
		return 0
	}
	wait := min(head[0].NextAttempt.Sub(now), d.opt.MaxBackoff)
	w.mu.Lock()
	w.failures = head[0].Attempts
	w.h.NextAttempt = now.Add(wait)
	w.mu.Unlock()
	return wait
}

// pass delivers what is due and says how long to wait before the next
// pass and whether a Kick may cut the wait short.
func (d *Dispatcher) pass(ctx context.Context, w *dispatchWorker) (time.Duration, bool) {
	name := w.n.Name()
	now := d.opt.Now()
	ds, err := d.ob.Due(ctx, name, now, d.opt.Batch)
	if err != nil {
		if ctx.Err() != nil {
			return 0, false
		}
		return d.fail(w, now, 0, fmt.Errorf("reading the outbox: %w", err), false), false
	}
	for _, dl := range ds {
		actx, cancel := context.WithTimeout(ctx, d.opt.AttemptTimeout)
		nerr := w.n.Notify(actx, dl.Transition)
		cancel()
		if ctx.Err() != nil {
			// Shutting down: the entry stays as it was and goes next run.
			return 0, false
		}
		now = d.opt.Now()
		if nerr == nil {
			if err := d.ob.Done(ctx, dl.ID); err != nil {
				// Delivered but still in the outbox: it goes again, and
				// the receiver drops it by its key.
				return d.fail(w, now, 0, fmt.Errorf("delivered %s, but removing it from the outbox failed: %w", dl.Transition.Key, err), false), false
			}
			w.succeed(d, now)
			continue
		}
		rejected := errors.Is(nerr, ErrRejected)
		wait := d.fail(w, now, dl.Attempts+1, nerr, rejected)
		var ra interface{ RetryAfter() time.Duration }
		if errors.As(nerr, &ra) && ra.RetryAfter() > wait {
			wait = min(ra.RetryAfter(), d.opt.MaxBackoff)
		}
		next := now.Add(wait)
		if err := d.ob.Retry(ctx, dl.ID, dl.Attempts+1, next, nerr.Error()); err != nil && ctx.Err() == nil {
			d.fail(w, now, 0, fmt.Errorf("recording a failed attempt of %s: %w", dl.Transition.Key, err), false)
		}
		if rejected {
			continue
		}
		w.mu.Lock()
		w.h.NextAttempt = next
		w.mu.Unlock()
		d.refreshQueue(ctx, w, now)
		return wait, false
	}
	d.refreshQueue(ctx, w, now)
	if len(ds) == d.opt.Batch {
		return 0, true
	}
	return d.opt.Poll, true
}

// fail records a failure and returns the backoff it calls for. attempts
// is the delivery's attempt count, so that the wait keeps growing across
// restarts; a rejection's wait follows its own delivery only.
func (d *Dispatcher) fail(w *dispatchWorker, now time.Time, attempts int, err error, rejected bool) time.Duration {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.failures++
	if w.h.ConsecutiveFailures == 0 {
		d.opt.Logger.Warn("notifier failing", "notifier", w.h.Notifier, "error", err.Error())
	}
	w.h.ConsecutiveFailures++
	w.h.LastFailure = now
	w.h.LastError = err.Error()
	if attempts > 0 {
		w.h.LastAttempt = now
		if rejected {
			w.h.Rejected++
		} else {
			w.h.Failed++
		}
	}
	n := max(attempts, w.failures)
	if rejected {
		n = attempts
	}
	return d.opt.backoff(max(n, 1))
}

func (w *dispatchWorker) succeed(d *Dispatcher, now time.Time) {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.h.ConsecutiveFailures > 0 {
		d.opt.Logger.Info("notifier recovered", "notifier", w.h.Notifier, "failures", w.h.ConsecutiveFailures)
	}
	w.failures = 0
	w.h.ConsecutiveFailures = 0
	w.h.LastAttempt = now
	w.h.LastSuccess = now
	w.h.NextAttempt = time.Time{}
	w.h.Delivered++
}

// refreshQueue counts the notifier's entries, due or not.
func (d *Dispatcher) refreshQueue(ctx context.Context, w *dispatchWorker, now time.Time) {
	name := w.n.Name()
	var oldest time.Time
	head, err := d.ob.Due(ctx, name, farFuture(now), 1)
	if err != nil {
		return
	}
	if len(head) > 0 {
		oldest = head[0].Transition.Time
	}
	n, err := d.ob.Pending(ctx, name)
	if err != nil {
		return
	}
	w.mu.Lock()
	w.h.Queue, w.h.OldestQueued = n, oldest
	if n == 0 {
		w.h.NextAttempt = time.Time{}
	}
	w.mu.Unlock()
}

// farFuture is late enough to make every entry due, and early enough for
// any store's time encoding.
func farFuture(now time.Time) time.Time { return now.AddDate(100, 0, 0) }
