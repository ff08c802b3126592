package store

import (
	"bytes"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// alarmLast is the latest journal record of one alarm, for Verify.
type alarmLast struct {
	seq     uint64
	ns      int64
	cleared bool
}

// alarms checks the alarm journal, its time index, the snapshots, their
// index and the outbox against each other. It holds the latest journal
// sequence number of every alarm in memory, a few dozen bytes per alarm.
func (v *verifier) alarms(tx *bolt.Tx) {
	journal := tx.Bucket(bucketJournal)
	if journal == nil {
		return
	}
	last := map[string]alarmLast{}
	damaged := map[uint64]bool{}
	v.guarded(string(bucketJournal), func() { v.journal(tx, journal, last, damaged) })
	if idx := tx.Bucket(bucketJournalAt); idx != nil {
		v.guarded(string(bucketJournalAt), func() { v.journalIndex(journal, idx) })
	}
	if alarms, idx := tx.Bucket(bucketAlarms), tx.Bucket(bucketAlarmsAt); alarms != nil && idx != nil {
		v.guarded(string(bucketAlarms), func() { v.snapshots(alarms, idx, last, damaged) })
		v.guarded(string(bucketAlarmsAt), func() { v.snapshotIndex(alarms, idx) })
	}
	if outbox := tx.Bucket(bucketOutbox); outbox != nil {
		v.guarded(string(bucketOutbox), func() { v.outbox(journal, outbox) })
	}
}

// journal checks that the entries are numbered 1, 2, 3, … with none
// missing: the journal is append-only and never swept, so a gap is a
// removed entry.
func (v *verifier) journal(tx *bolt.Tx, journal *bolt.Bucket, last map[string]alarmLast, damaged map[uint64]bool) {
	idx := tx.Bucket(bucketJournalAt)
	var want uint64 = 1
	c := journal.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		seq, ok := keySeq(k)
		switch {
		case val == nil:
			v.add("%s: %s is a bucket, not a value", bucketJournal, seqString(k))
			continue
		case !ok:
			v.add("%s: key %x is not an 8-byte sequence number", bucketJournal, k)
			continue
		case seq > want:
			if seq == want+1 {
				v.add("alarm journal entry #%d is missing (append-only: it was removed)", want)
			} else {
				v.add("alarm journal entries #%d to #%d are missing (append-only: they were removed)", want, seq-1)
			}
		}
		want = seq + 1
		e, err := decodeJournal(k, val)
		if err != nil {
			v.addErr(err)
			damaged[seq] = true
			continue
		}
		last[e.alarmID] = alarmLast{seq: e.seq, ns: e.ns, cleared: e.cleared}
		if idx != nil {
			at := pairKey(e.ns, k)
			if mark := idx.Get(at); mark == nil {
				v.add("alarm journal entry #%d at %s has no time index entry", e.seq, nsTime(e.ns).Format(time.RFC3339Nano))
			}
		}
	}
	if issued := journal.Sequence(); want-1 > issued {
		v.add("alarm journal holds entry #%d, but only %d sequence numbers were issued", want-1, issued)
	} else if want-1 < issued {
		v.add("alarm journal ends at entry #%d, but %d sequence numbers were issued (append-only: the last entries were removed)", want-1, issued)
	}
}

func (v *verifier) journalIndex(journal, idx *bolt.Bucket) {
	c := idx.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		ns, seq, ok := splitPairKey(k)
		if !ok || len(seq) != 8 {
			v.add("%s: key %x is not a time and a sequence number", bucketJournalAt, k)
			continue
		}
		if why := checkIndexMark(k, val); why != "" {
			v.add("%s: entry for %s at %s: %s", bucketJournalAt, seqString(seq), nsTime(ns).Format(time.RFC3339Nano), why)
			continue
		}
		raw := journal.Get(seq)
		if raw == nil {
			v.add("%s: entry for %s at %s names no journal entry", bucketJournalAt, seqString(seq), nsTime(ns).Format(time.RFC3339Nano))
			continue
		}
		if e, err := decodeJournal(seq, raw); err == nil && e.ns != ns {
			v.add("%s: entry for #%d at %s, the journal entry says %s", bucketJournalAt, e.seq, nsTime(ns).Format(time.RFC3339Nano), nsTime(e.ns).Format(time.RFC3339Nano))
		}
	}
}

// snapshots checks each snapshot against the journal: it must be the
// alarm's latest record, and every alarm the journal leaves open must
// have one. A cleared alarm's snapshot may be gone if a Sweep passed it.
// A journal entry that could not be read is reported once, where it is,
// and not again through the snapshot that names it.
func (v *verifier) snapshots(alarms, idx *bolt.Bucket, last map[string]alarmLast, damaged map[uint64]bool) {
	seen := map[string]bool{}
	c := alarms.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		if val == nil {
			v.add("%s: entry %q is a bucket, not a value", bucketAlarms, k)
			continue
		}
		seen[string(k)] = true
		a, err := decodeSnapshot(k, val)
		if err != nil {
			v.addErr(err)
			continue
		}
		if mark := idx.Get(pairKey(a.ns, k)); mark == nil {
			v.add("snapshot of alarm %q at %s has no update index entry", a.id, nsTime(a.ns).Format(time.RFC3339Nano))
		}
		l, ok := last[a.id]
		switch {
		case damaged[a.seq] || (ok && damaged[l.seq]):
		case !ok:
			v.add("snapshot of alarm %q (from journal entry #%d) has no journal entry for its alarm", a.id, a.seq)
		case l.seq != a.seq:
			v.add("snapshot of alarm %q is from journal entry #%d, the alarm's latest entry is #%d", a.id, a.seq, l.seq)
		case l.ns != a.ns || l.cleared != a.cleared:
			v.add("snapshot of alarm %q differs from its journal entry #%d in time or cleared state", a.id, a.seq)
		}
	}
	for id, l := range last {
		if seen[id] {
			continue
		}
		switch {
		case !l.cleared:
			v.add("alarm %q is open in the journal (entry #%d) but has no snapshot", id, l.seq)
		case l.ns >= v.sweptBefore:
			v.add("cleared alarm %q (journal entry #%d at %s) has no snapshot, and no Sweep reached it", id, l.seq, nsTime(l.ns).Format(time.RFC3339Nano))
		}
	}
}

func (v *verifier) snapshotIndex(alarms, idx *bolt.Bucket) {
	c := idx.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		ns, id, ok := splitPairKey(k)
		if !ok || len(id) == 0 {
			v.add("%s: key %x is not a time and an alarm ID", bucketAlarmsAt, k)
			continue
		}
		if why := checkIndexMark(k, val); why != "" {
			v.add("%s: entry for alarm %q at %s: %s", bucketAlarmsAt, id, nsTime(ns).Format(time.RFC3339Nano), why)
			continue
		}
		raw := alarms.Get(id)
		if raw == nil {
			v.add("%s: entry for alarm %q at %s names no snapshot", bucketAlarmsAt, id, nsTime(ns).Format(time.RFC3339Nano))
			continue
		}
		if a, err := decodeSnapshot(id, raw); err == nil && a.ns != ns {
			v.add("%s: entry for alarm %q at %s, its snapshot says %s", bucketAlarmsAt, id, nsTime(ns).Format(time.RFC3339Nano), nsTime(a.ns).Format(time.RFC3339Nano))
		}
	}
}

// outbox checks each notifier's queue: a bucket with a sane name, item
// IDs unique across queues and issued by the outbox's counter, and each
// item's payload equal to the journal entry it announces.
func (v *verifier) outbox(journal, outbox *bolt.Bucket) {
	issued := outbox.Sequence()
	owner := map[uint64]string{}
	_ = outbox.ForEach(func(name, val []byte) error {
		if val != nil {
			v.add("%s: entry %q is a value, not a notifier's queue", bucketOutbox, name)
			return nil
		}
		if why := checkName(string(name)); why != "" {
			v.add("%s: queue name %q: %s", bucketOutbox, name, why)
		}
		v.guarded(fmt.Sprintf("%s/%s", bucketOutbox, name), func() { v.queue(journal, outbox.Bucket(name), string(name), issued, owner) })
		return nil
	})
}

func (v *verifier) queue(journal, q *bolt.Bucket, notifier string, issued uint64, owner map[uint64]string) {
	c := q.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		if val == nil {
			v.add("%s/%s: %s is a bucket, not a value", bucketOutbox, notifier, seqString(k))
			continue
		}
		it, err := decodeOutbox(notifier, k, val)
		if err != nil {
			v.addErr(err)
			continue
		}
		if other, dup := owner[it.ID]; dup {
			v.add("outbox item #%d is queued for both %q and %q", it.ID, other, notifier)
		}
		owner[it.ID] = notifier
		if it.ID > issued {
			v.add("outbox item #%d of notifier %q was not issued by the outbox (last ID %d)", it.ID, notifier, issued)
		}
		raw := journal.Get(seqKey(it.Seq))
		if raw == nil {
			v.add("outbox item #%d of notifier %q announces journal entry #%d, which is missing", it.ID, notifier, it.Seq)
			continue
		}
		if e, err := decodeJournal(seqKey(it.Seq), raw); err == nil && !bytes.Equal(e.entry, it.Payload) {
			v.add("outbox item #%d of notifier %q differs from journal entry #%d it announces", it.ID, notifier, it.Seq)
		}
	}
}
