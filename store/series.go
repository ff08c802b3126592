package store

import (
	"bytes"
	"fmt"
	"math"
	"time"
	"unicode/utf8"

	bolt "go.etcd.io/bbolt"
)

// Limits on names and free text. A counter, sensor or zone name is also a
// bucket name; the caps only stop garbage.
const (
	maxNameLen   = 128
	maxReasonLen = 4096
)

var (
	minTime = time.Unix(0, 0).UTC()
	// maxTime is exclusive: MaxInt64 nanoseconds serves as the open upper
	// bound of a scan, so no record may sit on it.
	maxTime = time.Unix(0, math.MaxInt64).UTC()
)

// checkTime returns why t cannot be a key, or "".
func checkTime(t time.Time) string {
	switch {
	case t.IsZero():
		return "zero time"
	case t.Before(minTime):
		return fmt.Sprintf("%s is before 1970-01-01", t.UTC().Format(time.RFC3339Nano))
	case !t.Before(maxTime):
		return fmt.Sprintf("%s is after %s", t.UTC().Format(time.RFC3339), maxTime.Format(time.RFC3339))
	}
	return ""
}

// checkName returns why s cannot name a counter, sensor or zone, or "".
func checkName(s string) string {
	switch {
	case s == "":
		return "empty"
	case len(s) > maxNameLen:
		return fmt.Sprintf("%d bytes, more than %d", len(s), maxNameLen)
	case !utf8.ValidString(s):
		return "not valid UTF-8"
	}
	return ""
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// keyRange turns [from, to) into keys; zero means unbounded. ok is false
// when nothing can match.
func keyRange(from, to time.Time) (lo, hi []byte, ok bool, err error) {
	if !from.IsZero() && !to.IsZero() && from.After(to) {
		return nil, nil, false, &RangeError{Param: "to", Reason: fmt.Sprintf("%s is before from %s", to.Format(time.RFC3339Nano), from.Format(time.RFC3339Nano))}
	}
	loN, hiN := int64(0), int64(math.MaxInt64)
	if !from.IsZero() && from.After(minTime) {
		if !from.Before(maxTime) {
			return nil, nil, false, nil
		}
		loN = from.UnixNano()
	}
	if !to.IsZero() && to.Before(maxTime) {
		if !to.After(minTime) {
			return nil, nil, false, nil
		}
		hiN = to.UnixNano()
	}
	if loN >= hiN {
		return nil, nil, false, nil
	}
	return nanosKey(loN), nanosKey(hiN), true, nil
}

// seriesRange checks the name of the series a scan reads and turns
// [from, to) into key times; ok is false when nothing can match.
func seriesRange(name string, from, to time.Time) (lo, hi int64, ok bool, err error) {
	if reason := checkName(name); reason != "" {
		return 0, 0, false, fmt.Errorf("%w: name %q: %s", ErrInvalid, name, reason)
	}
	klo, khi, ok, err := keyRange(from, to)
	if err != nil || !ok {
		return 0, 0, false, err
	}
	lo, _ = keyNanos(klo)
	hi, _ = keyNanos(khi)
	return lo, hi, true, nil
}

// scanSeries streams the decoded values of kind/name with keys in [from, to).
func scanSeries[T any](s *Store, kind []byte, name string, from, to time.Time,
	decode func(name string, k, v []byte) (T, error), fn func(T) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	loN, hiN, ok, err := seriesRange(name, from, to)
	if err != nil || !ok {
		return err
	}
	lo, hi := nanosKey(loN), nanosKey(hiN)
	return s.view(func(tx *bolt.Tx, g *guard) error {
		b := tx.Bucket(kind).Bucket([]byte(name))
		if b == nil {
			return nil
		}
		c := b.Cursor()
		for k, v := c.Seek(lo); k != nil && bytes.Compare(k, hi) < 0; k, v = c.Next() {
			rec, err := decode(name, k, v)
			if err != nil {
				return err
			}
			if err := g.call(func() error { return fn(rec) }); err != nil {
				return err
			}
		}
		return nil
	})
}

// seriesBuckets hands out the nested bucket of each name inside one
// transaction, created on first use.
type seriesBuckets struct {
	root *bolt.Bucket
	m    map[string]*bolt.Bucket
}

func newSeriesBuckets(tx *bolt.Tx, kind []byte) *seriesBuckets {
	return &seriesBuckets{root: tx.Bucket(kind), m: map[string]*bolt.Bucket{}}
}

func (sb *seriesBuckets) get(name string) (*bolt.Bucket, error) {
	if b, ok := sb.m[name]; ok {
		return b, nil
	}
	b, err := sb.root.CreateBucketIfNotExists([]byte(name))
	if err != nil {
		return nil, fmt.Errorf("store: bucket %q: %w", name, err)
	}
	b.FillPercent = fillPercent
	sb.m[name] = b
	return b, nil
}
