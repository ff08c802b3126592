package store

import (
	"context"
	"fmt"
	"time"
	"unicode/utf8"

	bolt "go.etcd.io/bbolt"
)

// OutboxItem is one pending notification: one journaled alarm record to
// one notifier. RecordAlarms creates it, OutboxRetry updates it after a
// failed attempt, and OutboxDone removes it once delivered.
type OutboxItem struct {
	ID       uint64 // unique across notifiers, rising in creation order
	Notifier string
	Seq      uint64 // journal sequence number of the record it announces
	Payload  []byte // the record's Entry
	Attempts int
	// NextAttempt is when the item is due again; zero means at once.
	NextAttempt time.Time
	LastError   string
	Created     time.Time // wall-clock time of the RecordAlarms call
}

// OutboxDue returns up to limit items of notifier whose NextAttempt is at
// or before now (or zero), oldest first. It walks the notifier's own
// queue only, from its oldest item, so its cost is the items it returns
// plus the ones it passes over because they are not due. An unknown
// notifier has an empty queue.
func (s *Store) OutboxDue(notifier string, now time.Time, limit int) ([]OutboxItem, error) {
	if err := s.enter(); err != nil {
		return nil, err
	}
	defer s.exit()
	if why := checkName(notifier); why != "" {
		return nil, fmt.Errorf("%w: outbox due: notifier %q: %s", ErrInvalid, notifier, why)
	}
	if limit <= 0 {
		return nil, fmt.Errorf("%w: outbox due: limit %d is not positive", ErrInvalid, limit)
	}
	var out []OutboxItem
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		q := tx.Bucket(bucketOutbox).Bucket([]byte(notifier))
		if q == nil {
			return nil
		}
		c := q.Cursor()
		for k, v := c.First(); k != nil && len(out) < limit; k, v = c.Next() {
			it, err := decodeOutbox(notifier, k, v)
			if err != nil {
				return err
			}
			if it.NextAttempt.IsZero() || !it.NextAttempt.After(now) {
				out = append(out, it)
			}
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// OutboxLen counts the items of notifier, due or not.
func (s *Store) OutboxLen(notifier string) (int, error) {
	if err := s.enter(); err != nil {
		return 0, err
	}
	defer s.exit()
	if why := checkName(notifier); why != "" {
		return 0, fmt.Errorf("%w: outbox length: notifier %q: %s", ErrInvalid, notifier, why)
	}
	n := 0
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		if q := tx.Bucket(bucketOutbox).Bucket([]byte(notifier)); q != nil {
			n = q.Stats().KeyN
		}
		return nil
	})
	return n, err
}

// OutboxDone removes a delivered item durably. An ID not in the outbox
// gives ErrNotFound.
func (s *Store) OutboxDone(ctx context.Context, id uint64) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	return s.submit(ctx, 1, func(tx *bolt.Tx) error {
		q, _, err := findOutboxItem(tx, id)
		if err != nil {
			return err
		}
		return q.Delete(seqKey(id))
	})
}

// OutboxRetry records a failed attempt durably: the attempt count, when
// the item is due again (zero: at once) and the error, cut to 4 096 bytes
// at a character boundary. A negative attempts or a next outside
// 1970–2262 gives ErrInvalid, an ID not in the outbox ErrNotFound.
func (s *Store) OutboxRetry(ctx context.Context, id uint64, attempts int, next time.Time, lastErr string) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	if attempts < 0 || attempts > maxAttempts {
		return fmt.Errorf("%w: outbox retry of item %d: attempts %d out of range", ErrInvalid, id, attempts)
	}
	if !next.IsZero() {
		if why := checkTime(next); why != "" {
			return fmt.Errorf("%w: outbox retry of item %d: next attempt %s", ErrInvalid, id, why)
		}
	}
	lastErr = cutText(lastErr, maxReasonLen)
	return s.submit(ctx, 1, func(tx *bolt.Tx) error {
		q, it, err := findOutboxItem(tx, id)
		if err != nil {
			return err
		}
		it.Attempts, it.NextAttempt, it.LastError = attempts, next, lastErr
		k := seqKey(id)
		return q.Put(k, encodeOutbox(k, &it))
	})
}

// findOutboxItem looks the ID up in every notifier's queue: there are a
// handful, and an ID index would be one more thing to keep in step.
func findOutboxItem(tx *bolt.Tx, id uint64) (*bolt.Bucket, OutboxItem, error) {
	root := tx.Bucket(bucketOutbox)
	k := seqKey(id)
	var (
		found *bolt.Bucket
		name  string
	)
	err := root.ForEachBucket(func(n []byte) error {
		if q := root.Bucket(n); q.Get(k) != nil {
			found, name = q, string(n)
		}
		return nil
	})
	if err != nil {
		return nil, OutboxItem{}, err
	}
	if found == nil {
		return nil, OutboxItem{}, fmt.Errorf("%w: outbox item %d", ErrNotFound, id)
	}
	it, err := decodeOutbox(name, k, found.Get(k))
	return found, it, err
}

// cutText shortens s to at most max bytes without splitting a character.
func cutText(s string, max int) string {
	if len(s) <= max {
		return s
	}
	s = s[:max]
	for i := 0; i < utf8.UTFMax-1; i++ {
		if r, size := utf8.DecodeLastRuneInString(s); r != utf8.RuneError || size != 1 {
			break
		}
		s = s[:len(s)-1]
	}
	return s
}
