package collector

import (
	"context"
	"fmt"
	"sync"
	"time"
)

// maxCoalesced bounds one coalesced commit: a burst of submissions is
// committed in pieces of about this many samples, not held for the whole
// window.
const maxCoalesced = 1000

// markFunc commits samples durably and says per sample whether it was
// stored by this call (false: a duplicate of a stored one).
type markFunc[T any] func(ctx context.Context, xs []T) ([]bool, error)

// commitMarked commits xs, repeats within xs removed, and hands what was
// stored to the observers. A failed commit is reported through reject and
// returned wrapping ErrCommit.
func commitMarked[T any](ctx context.Context, xs []T, key func(*T) dupKey, commit markFunc[T], observers []func([]T), reject func(error)) (Result, error) {
	if len(xs) == 0 {
		return Result{}, nil
	}
	uniq, dups := dropRepeats(xs, key)
	stored, err := commit(ctx, uniq)
	if err == nil && len(stored) != len(uniq) {
		err = fmt.Errorf("storage marked %d of %d samples", len(stored), len(uniq))
	}
	if err != nil {
		err = fmt.Errorf("%w: %w", ErrCommit, err)
		reject(err)
		return Result{}, err
	}
	fresh := uniq[:0:0]
	for i, ok := range stored {
		if ok {
			fresh = append(fresh, uniq[i])
		}
	}
	if len(fresh) > 0 {
		for _, f := range observers {
			f(fresh)
		}
	}
	return Result{Accepted: len(fresh), Duplicates: len(uniq) - len(fresh) + dups}, nil
}

// coalescer gathers the samples of the small submissions that arrive
// within a window (one Modbus poll of one device) into one commit. The
// store writes an audit entry (about 180 bytes, kept) and a head record
// (about 80, until compaction) per commit: at one commit per sample, a DP
// sensor polled every 10 s would add some 560 MB a year of audit entries
// to a store that keeps the sample itself in about a byte. Each caller still waits for the
// durable commit and gets its own samples' marks; a sample the window
// repeats (same series and time, sent twice) is stored once and marked a
// duplicate for the later caller.
type coalescer[T any] struct {
	window time.Duration
	key    func(*T) dupKey
	commit markFunc[T]

	mu  sync.Mutex
	cur *coalesced[T] // gathering; nil when none
}

// coalesced is one commit being gathered or made.
type coalesced[T any] struct {
	ctx    context.Context // of the first caller, without its cancellation
	xs     []T
	done   chan struct{}
	stored []bool
	err    error
}

func newCoalescer[T any](window time.Duration, key func(*T) dupKey, commit markFunc[T]) *coalescer[T] {
	return &coalescer[T]{window: window, key: key, commit: commit}
}

// mark adds xs to the commit being gathered and waits for it. A caller
// whose ctx ends first gets ctx's error; its samples may still be stored,
// as with any commit cut short.
func (c *coalescer[T]) mark(ctx context.Context, xs []T) ([]bool, error) {
	if len(xs) == 0 {
		return nil, ctx.Err()
	}
	c.mu.Lock()
	b := c.cur
	if b == nil {
		b = &coalesced[T]{ctx: context.WithoutCancel(ctx), done: make(chan struct{})}
		c.cur = b
		time.AfterFunc(c.window, func() { c.flush(b) })
	}
	off := len(b.xs)
	b.xs = append(b.xs, xs...)
	if len(b.xs) >= maxCoalesced {
		c.cur = nil
		go c.run(b)
	}
	c.mu.Unlock()
	select {
	case <-b.done:
	case <-ctx.Done():
		return nil, ctx.Err()
	}
	if b.err != nil {
		return nil, b.err
	}
	return b.stored[off : off+len(xs)], nil
}

// flush commits b when its window ends, unless it was committed already
// for being full.
func (c *coalescer[T]) flush(b *coalesced[T]) {
	c.mu.Lock()
	mine := c.cur == b
	if mine {
		c.cur = nil
	}
	c.mu.Unlock()
	if mine {
		c.run(b)
	}
}

// run commits b once, repeats across its callers removed.
func (c *coalescer[T]) run(b *coalesced[T]) {
	defer close(b.done)
	b.stored = make([]bool, len(b.xs))
	first := make(map[dupKey]struct{}, len(b.xs))
	var uniq []T
	var at []int // index in b.xs of each of uniq
	for i := range b.xs {
		k := c.key(&b.xs[i])
		if _, seen := first[k]; seen {
			continue
		}
		first[k] = struct{}{}
		uniq, at = append(uniq, b.xs[i]), append(at, i)
	}
	stored, err := c.commit(b.ctx, uniq)
	if err == nil && len(stored) != len(uniq) {
		err = fmt.Errorf("storage marked %d of %d samples", len(stored), len(uniq))
	}
	if err != nil {
		b.err = err
		return
	}
	for j, ok := range stored {
		b.stored[at[j]] = ok
	}
}
