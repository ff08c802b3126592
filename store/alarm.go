package store

import (
	"bytes"
	"context"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// AlarmRecord is one transition of one alarm, as the alarm engine
// journals it. Snapshot and Entry are opaque to the store (the engine's
// adapter marshals them); Entry is also what each notifier is sent. By
// and Reason go to the transition's audit entry only.
type AlarmRecord struct {
	AlarmID  string
	Time     time.Time // when the transition happened
	Cleared  bool      // the alarm is cleared after this transition
	Snapshot []byte    // the alarm as it is after the transition
	Entry    []byte    // the transition itself
	By       string    // who made it (an acknowledgement's user); "" for the engine
	Reason   string    // the comment given with it, if any
}

func checkPayload(b []byte) string {
	switch {
	case len(b) == 0:
		return "empty"
	case len(b) > maxPayloadLen:
		return fmt.Sprintf("%d bytes, more than %d", len(b), maxPayloadLen)
	}
	return ""
}

func checkAlarmRecord(r *AlarmRecord) (field, reason string) {
	if why := checkName(r.AlarmID); why != "" {
		return "AlarmID", why
	}
	if why := checkTime(r.Time); why != "" {
		return "Time", why
	}
	if why := checkPayload(r.Snapshot); why != "" {
		return "Snapshot", why
	}
	if why := checkPayload(r.Entry); why != "" {
		return "Entry", why
	}
	if r.By != "" {
		if why := checkName(r.By); why != "" {
			return "By", why
		}
	}
	if len(r.Reason) > maxReasonLen {
		return "Reason", fmt.Sprintf("%d bytes, more than %d", len(r.Reason), maxReasonLen)
	}
	return "", ""
}

// checkNotifiers returns the first bad notifier name as a *RecordError.
func checkNotifiers(notifiers []string) error {
	seen := make(map[string]int, len(notifiers))
	for i, n := range notifiers {
		if why := checkName(n); why != "" {
			return &RecordError{Kind: "notifier", Index: i, Field: "Name", Reason: why}
		}
		if j, dup := seen[n]; dup {
			return &RecordError{Kind: "notifier", Index: i, Field: "Name", Reason: fmt.Sprintf("%q repeats index %d", n, j)}
		}
		seen[n] = i
	}
	return nil
}

// RecordAlarms journals recs and queues their notifications in one
// durable transaction, shared with other writers through the group
// commit: when it returns nil, every record is in the journal, each
// alarm's snapshot is the last of its records in recs, and there is one
// outbox item per record and notifier with the record's Entry as
// payload; when it returns an error, none of that happened.
//
// Each record also gets an AuditAlarm entry in the audit chain (Actor By,
// or AuditActorSystem), covering its journal entry.
//
// The journal is append-only: every record gets the next sequence number,
// returned in the order of recs, and is never rewritten or swept. Times
// need not rise with the sequence (a clock may step back); scans by time
// use an index. A record that is invalid, or a bad or repeated notifier
// name, fails the call with a *RecordError and nothing is stored.
func (s *Store) RecordAlarms(ctx context.Context, recs []AlarmRecord, notifiers []string) ([]uint64, error) {
	if err := s.enter(); err != nil {
		return nil, err
	}
	defer s.exit()
	if len(recs) == 0 {
		return nil, ctx.Err()
	}
	prep := make([]journalEntry, len(recs))
	for i := range recs {
		r := &recs[i]
		if field, reason := checkAlarmRecord(r); field != "" {
			return nil, &RecordError{Kind: "alarm record", Index: i, Field: field, Reason: reason}
		}
		prep[i] = journalEntry{ns: r.Time.UnixNano(), alarmID: r.AlarmID, cleared: r.Cleared, entry: r.Entry}
	}
	if err := checkNotifiers(notifiers); err != nil {
		return nil, err
	}
	created := time.Now()
	seqs := make([]uint64, len(recs))
	err := s.submit(ctx, len(recs)*(1+len(notifiers)), func(tx *bolt.Tx) error {
		return s.putAlarms(tx, recs, prep, notifiers, created, seqs)
	})
	if err != nil {
		return nil, err
	}
	return seqs, nil
}

func (s *Store) putAlarms(tx *bolt.Tx, recs []AlarmRecord, prep []journalEntry, notifiers []string, created time.Time, seqs []uint64) error {
	journal, journalAt := tx.Bucket(bucketJournal), tx.Bucket(bucketJournalAt)
	journal.FillPercent, journalAt.FillPercent = fillPercent, fillPercent
	outbox := tx.Bucket(bucketOutbox)
	queues := newSeriesBuckets(tx, bucketOutbox)
	for i := range prep {
		e := &prep[i]
		seq, err := journal.NextSequence()
		if err != nil {
			return err
		}
		e.seq, seqs[i] = seq, seq
		key := seqKey(seq)
		val := encodeJournal(key, e)
		if err := journal.Put(key, val); err != nil {
			return fmt.Errorf("store: journal alarm %q: %w", e.alarmID, err)
		}
		cov := newCoverage(coverJournal)
		cov.add("", key, val)
		if _, _, err := appendAudit(tx, &AuditEntry{
			Time: recs[i].Time.UTC(), Actor: actorOrSystem(recs[i].By), Action: AuditAlarm,
			Subject: e.alarmID, Reason: recs[i].Reason, Detail: cov.detail(),
		}); err != nil {
			return err
		}
		at := pairKey(e.ns, key)
		if err := journalAt.Put(at, indexMark(at)); err != nil {
			return err
		}
		snap := alarmSnapshot{id: e.alarmID, ns: e.ns, seq: seq, cleared: e.cleared, snapshot: recs[i].Snapshot}
		if err := s.putSnapshot(tx, &snap); err != nil {
			return err
		}
		for _, n := range notifiers {
			q, err := queues.get(n)
			if err != nil {
				return fmt.Errorf("store: outbox of notifier %q: %w", n, err)
			}
			id, err := outbox.NextSequence()
			if err != nil {
				return err
			}
			it := OutboxItem{ID: id, Notifier: n, Seq: seq, Payload: e.entry, Created: created}
			k := seqKey(id)
			if err := q.Put(k, encodeOutbox(k, &it)); err != nil {
				return fmt.Errorf("store: outbox of notifier %q: %w", n, err)
			}
		}
	}
	return nil
}

// putSnapshot replaces an alarm's snapshot and moves its entry in the
// updated-time index.
func (s *Store) putSnapshot(tx *bolt.Tx, a *alarmSnapshot) error {
	alarms, alarmsAt := tx.Bucket(bucketAlarms), tx.Bucket(bucketAlarmsAt)
	id := []byte(a.id)
	if old := alarms.Get(id); old != nil {
		prev, err := decodeSnapshot(id, old)
		if err != nil {
			// The journal holds the truth; a damaged snapshot must not
			// stop new transitions from being recorded.
			s.log.Error("store: replacing a damaged alarm snapshot", "alarm", a.id, "error", err.Error())
			if err := dropIndexEntries(alarmsAt, id); err != nil {
				return err
			}
		} else if err := alarmsAt.Delete(pairKey(prev.ns, id)); err != nil {
			return err
		}
	}
	if err := alarms.Put(id, encodeSnapshot(id, a)); err != nil {
		return fmt.Errorf("store: snapshot of alarm %q: %w", a.id, err)
	}
	at := pairKey(a.ns, id)
	return alarmsAt.Put(at, indexMark(at))
}

// dropIndexEntries deletes every updated-time index entry of one alarm:
// the slow path for a snapshot whose time can no longer be read.
func dropIndexEntries(idx *bolt.Bucket, id []byte) error {
	var stale [][]byte
	c := idx.Cursor()
	for k, _ := c.First(); k != nil; k, _ = c.Next() {
		if _, rest, ok := splitPairKey(k); ok && bytes.Equal(rest, id) {
			stale = append(stale, bytes.Clone(k))
		}
	}
	for _, k := range stale {
		if err := idx.Delete(k); err != nil {
			return err
		}
	}
	return nil
}

// OpenAlarms calls fn with the latest snapshot of every alarm not
// cleared, in alarm ID order, inside one read transaction; an error from
// fn stops it and is returned. fn may keep snapshot.
func (s *Store) OpenAlarms(fn func(id string, snapshot []byte) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	return s.view(func(tx *bolt.Tx, g *guard) error {
		c := tx.Bucket(bucketAlarms).Cursor()
		for k, v := c.First(); k != nil; k, v = c.Next() {
			a, err := decodeSnapshot(k, v)
			if err != nil {
				return err
			}
			if a.cleared {
				continue
			}
			if err := g.call(func() error { return fn(a.id, a.snapshot) }); err != nil {
				return err
			}
		}
		return nil
	})
}

// ScanAlarms calls fn with every alarm whose latest transition is at or
// after since (zero: every alarm kept), newest first, open and cleared
// alike; cleared alarms stay until a Sweep passes them. It runs in one
// read transaction; an error from fn stops it and is returned.
func (s *Store) ScanAlarms(since time.Time, fn func(id string, updated time.Time, snapshot []byte, cleared bool) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	lo := int64(0)
	if !since.IsZero() && since.After(minTime) {
		if !since.Before(maxTime) {
			return nil
		}
		lo = since.UnixNano()
	}
	return s.view(func(tx *bolt.Tx, g *guard) error {
		alarms := tx.Bucket(bucketAlarms)
		c := tx.Bucket(bucketAlarmsAt).Cursor()
		for k, v := c.Last(); k != nil; k, v = c.Prev() {
			ns, id, ok := splitPairKey(k)
			if !ok || checkIndexMark(k, v) != "" {
				return fmt.Errorf("%w: alarm update index entry %x is damaged", ErrCorrupt, k)
			}
			if ns < lo {
				return nil
			}
			raw := alarms.Get(id)
			if raw == nil {
				return fmt.Errorf("%w: alarm update index names alarm %q, which has no snapshot", ErrCorrupt, id)
			}
			a, err := decodeSnapshot(id, raw)
			if err != nil {
				return err
			}
			if a.ns != ns {
				return fmt.Errorf("%w: alarm update index puts alarm %q at %s, its snapshot at %s", ErrCorrupt, id, nsTime(ns).Format(time.RFC3339Nano), nsTime(a.ns).Format(time.RFC3339Nano))
			}
			if err := g.call(func() error { return fn(a.id, nsTime(a.ns), a.snapshot, a.cleared) }); err != nil {
				return err
			}
		}
		return nil
	})
}

// ScanAlarmJournal calls fn with every journaled transition whose time is
// in [from, to) (zero: unbounded), in time order and, at equal times, in
// sequence order, inside one read transaction; an error from fn stops it
// and is returned. fn may keep entry.
func (s *Store) ScanAlarmJournal(from, to time.Time, fn func(seq uint64, t time.Time, alarmID string, entry []byte) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	lo, hi, ok, err := keyRange(from, to)
	if err != nil || !ok {
		return err
	}
	return s.view(func(tx *bolt.Tx, g *guard) error {
		journal := tx.Bucket(bucketJournal)
		c := tx.Bucket(bucketJournalAt).Cursor()
		for k, v := c.Seek(lo); k != nil && bytes.Compare(k, hi) < 0; k, v = c.Next() {
			ns, rest, ok := splitPairKey(k)
			if !ok || len(rest) != 8 || checkIndexMark(k, v) != "" {
				return fmt.Errorf("%w: alarm journal time index entry %x is damaged", ErrCorrupt, k)
			}
			raw := journal.Get(rest)
			if raw == nil {
				return fmt.Errorf("%w: alarm journal time index names entry %s, which is missing", ErrCorrupt, seqString(rest))
			}
			e, err := decodeJournal(rest, raw)
			if err != nil {
				return err
			}
			if e.ns != ns {
				return fmt.Errorf("%w: alarm journal time index puts entry #%d at %s, the entry says %s", ErrCorrupt, e.seq, nsTime(ns).Format(time.RFC3339Nano), nsTime(e.ns).Format(time.RFC3339Nano))
			}
			if err := g.call(func() error { return fn(e.seq, nsTime(e.ns), e.alarmID, e.entry) }); err != nil {
				return err
			}
		}
		return nil
	})
}
