package store

import (
	"context"
	"runtime/debug"
	"sync/atomic"

	bolt "go.etcd.io/bbolt"
)

// commitMode selects how concurrent writes share transactions. Both are
// kept so the benchmarks can compare them; commitQueue is the default.
type commitMode int

const (
	commitQueue commitMode = iota // own committer goroutine
	commitBatch                   // bbolt DB.Batch
)

// maxGroupRecords bounds the records one group transaction takes on, so
// that its dirty pages stay a few megabytes.
const maxGroupRecords = 64 << 10

// request is one write call waiting for the committer. apply may run more
// than once (a group is retried without a failing member), so it resets
// whatever it reports at its start.
type request struct {
	apply   func(tx *bolt.Tx) error
	records int
	state   atomic.Int32 // reqQueued → reqTaken by the committer, or → reqCanceled by the caller
	done    chan error
}

const (
	reqQueued int32 = iota
	reqTaken
	reqCanceled
)

// submit runs apply in a shared, durable transaction and returns once it
// committed or failed. A caller whose ctx ends while its request still
// waits in the queue withdraws it; once the committer has taken it, the
// caller waits for the outcome, so an error never hides a stored record.
func (s *Store) submit(ctx context.Context, records int, apply func(tx *bolt.Tx) error) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if s.opt.commit == commitBatch {
		return s.batch(apply)
	}
	r := &request{apply: apply, records: records, done: make(chan error, 1)}
	select {
	case s.reqs <- r:
	case <-ctx.Done():
		return ctx.Err()
	}
	select {
	case err := <-r.done:
		return err
	case <-ctx.Done():
		if r.state.CompareAndSwap(reqQueued, reqCanceled) {
			return ctx.Err()
		}
		return <-r.done
	}
}

// committer takes every request waiting when it starts a transaction and
// commits them together: callers arriving during an fsync form the next
// group, so throughput grows with concurrency without a batch timer.
func (s *Store) committer() {
	defer close(s.committerDone)
	debug.SetPanicOnFault(true)
	for first := range s.reqs {
		if s.beforeCommit != nil {
			s.beforeCommit()
		}
		group := []*request{first}
		total := first.records
	collect:
		for total < maxGroupRecords {
			select {
			case r, ok := <-s.reqs:
				if !ok {
					break collect
				}
				group = append(group, r)
				total += r.records
			default:
				break collect
			}
		}
		s.commitGroup(group)
	}
}

func (s *Store) commitGroup(group []*request) {
	live := group[:0]
	for _, r := range group {
		if r.state.CompareAndSwap(reqQueued, reqTaken) {
			live = append(live, r)
		}
	}
	for len(live) > 0 {
		failed, failErr := -1, error(nil)
		err := s.update(func(tx *bolt.Tx) error {
			for i, r := range live {
				if err := s.safeApply(r.apply, tx); err != nil {
					failed, failErr = i, err
					return err
				}
			}
			return nil
		})
		if failed >= 0 {
			// The member's own error, not the rollback's; the others
			// go again without it.
			live[failed].done <- commitError(failErr)
			live = append(live[:failed], live[failed+1:]...)
			continue
		}
		if err == nil {
			s.commits.Add(1)
		}
		for _, r := range live {
			r.done <- err
		}
		return
	}
}

// safeApply runs one member's changes; a panic fails that member only.
func (s *Store) safeApply(apply func(*bolt.Tx) error, tx *bolt.Tx) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = s.panicError("write", r)
		}
	}()
	return apply(tx)
}

// batch is the DB.Batch variant: bbolt gathers callers for MaxBatchDelay
// and reruns a failing fn alone in its own transaction.
func (s *Store) batch(apply func(tx *bolt.Tx) error) error {
	err := s.db.Batch(func(tx *bolt.Tx) error {
		defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
		if s.lastBatchTx.Swap(tx) != tx {
			s.commits.Add(1) // attempts, counted once per transaction
		}
		return s.safeApply(apply, tx)
	})
	return commitError(err)
}
