package store

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"time"
)

// Encodings of the alarm journal, the alarm snapshots, their indexes and
// the notification outbox, in the layout of codec.go: version byte,
// body, CRC-32C over key and value.
//
//	journal   key seq             body flags | varint time | str alarm ID | bytes entry
//	snapshot  key alarm ID        body flags | varint updated | uvarint seq | bytes snapshot
//	outbox    key item ID         body uvarint seq | varint created | varint next | uvarint attempts | str last error | bytes payload
//	indexes   key time ‖ seq or time ‖ alarm ID, body empty
//
// An index entry carries a sealed empty body so that a changed key byte
// fails its checksum, as it would in a value.
const (
	flagCleared = 1 << 0

	// maxPayloadLen bounds one snapshot, journal entry or outbox payload.
	// An alarm's JSON form is well under a kilobyte; this only stops
	// garbage from filling the file.
	maxPayloadLen = 1 << 20
	// maxAttempts bounds the stored attempt count of an outbox item.
	maxAttempts = math.MaxInt32
)

// seqKey is the 8-byte big-endian key of a sequence number or an ID.
func seqKey(n uint64) []byte { return binary.BigEndian.AppendUint64(make([]byte, 0, 8), n) }

func keySeq(k []byte) (uint64, bool) {
	if len(k) != 8 {
		return 0, false
	}
	return binary.BigEndian.Uint64(k), true
}

// pairKey is an index key: 8-byte big-endian time, then the rest (a
// sequence key or an alarm ID), so a cursor walks time, then the rest.
func pairKey(ns int64, rest []byte) []byte {
	k := make([]byte, 0, 8+len(rest))
	k = binary.BigEndian.AppendUint64(k, uint64(ns))
	return append(k, rest...)
}

func splitPairKey(k []byte) (ns int64, rest []byte, ok bool) {
	if len(k) < 8 {
		return 0, nil, false
	}
	ns, ok = keyNanos(k[:8])
	return ns, k[8:], ok
}

func indexMark(key []byte) []byte { return seal(key, []byte{codecV1}) }

// checkIndexMark reports why an index entry's value is not a sealed empty
// body, or "".
func checkIndexMark(key, v []byte) string {
	body, err := unseal(key, v)
	if err != nil {
		return err.Error()
	}
	if len(body) != 0 {
		return fmt.Sprintf("%d unexpected bytes in an index entry", len(body))
	}
	return ""
}

func nsTime(ns int64) time.Time { return time.Unix(0, ns).UTC() }

func (d *decoder) bytes(what string, max int) []byte {
	n := d.uvarint(what)
	if d.err != nil {
		return nil
	}
	if n > uint64(max) || n > uint64(len(d.b)) {
		d.fail("%s: length %d out of range", what, n)
		return nil
	}
	out := bytes.Clone(d.b[:n])
	d.b = d.b[n:]
	return out
}

func appendBytes(b, v []byte) []byte {
	b = binary.AppendUvarint(b, uint64(len(v)))
	return append(b, v...)
}

// journalEntry is one stored alarm transition.
type journalEntry struct {
	seq     uint64
	ns      int64
	alarmID string
	cleared bool
	entry   []byte
}

func encodeJournal(key []byte, e *journalEntry) []byte {
	b := make([]byte, 0, 24+len(e.alarmID)+len(e.entry)+crcLen)
	b = append(b, codecV1, boolFlag(e.cleared))
	b = binary.AppendVarint(b, e.ns)
	b = appendBytes(b, []byte(e.alarmID))
	b = appendBytes(b, e.entry)
	return seal(key, b)
}

func decodeJournal(key, v []byte) (journalEntry, error) {
	fail := func(err error) (journalEntry, error) {
		return journalEntry{}, fmt.Errorf("%w: alarm journal entry %s: %v", ErrCorrupt, seqString(key), err)
	}
	seq, ok := keySeq(key)
	if !ok || seq == 0 {
		return fail(fmt.Errorf("key is not a nonzero 8-byte sequence number"))
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	flags := d.byte1("flags")
	e := journalEntry{seq: seq, cleared: flags&flagCleared != 0}
	e.ns = d.varint("Time")
	e.alarmID = d.str("AlarmID", maxNameLen)
	e.entry = d.bytes("Entry", maxPayloadLen)
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if flags&^flagCleared != 0 {
		return fail(fmt.Errorf("unknown flags %#x", flags))
	}
	if field, reason := checkStoredAlarm(e.alarmID, e.ns, "Entry", e.entry); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return e, nil
}

// alarmSnapshot is the stored latest form of one alarm.
type alarmSnapshot struct {
	id       string
	ns       int64  // Time of the transition that wrote it
	seq      uint64 // its journal sequence number
	cleared  bool
	snapshot []byte
}

func encodeSnapshot(key []byte, a *alarmSnapshot) []byte {
	b := make([]byte, 0, 24+len(a.snapshot)+crcLen)
	b = append(b, codecV1, boolFlag(a.cleared))
	b = binary.AppendVarint(b, a.ns)
	b = binary.AppendUvarint(b, a.seq)
	b = appendBytes(b, a.snapshot)
	return seal(key, b)
}

func decodeSnapshot(key, v []byte) (alarmSnapshot, error) {
	fail := func(err error) (alarmSnapshot, error) {
		return alarmSnapshot{}, fmt.Errorf("%w: snapshot of alarm %q: %v", ErrCorrupt, key, err)
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	flags := d.byte1("flags")
	a := alarmSnapshot{id: string(key), cleared: flags&flagCleared != 0}
	a.ns = d.varint("Time")
	a.seq = d.uvarint("Seq")
	a.snapshot = d.bytes("Snapshot", maxPayloadLen)
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if flags&^flagCleared != 0 {
		return fail(fmt.Errorf("unknown flags %#x", flags))
	}
	if a.seq == 0 {
		return fail(fmt.Errorf("Seq: zero"))
	}
	if field, reason := checkStoredAlarm(a.id, a.ns, "Snapshot", a.snapshot); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return a, nil
}

func encodeOutbox(key []byte, it *OutboxItem) []byte {
	b := make([]byte, 0, 40+len(it.LastError)+len(it.Payload)+crcLen)
	b = append(b, codecV1)
	b = binary.AppendUvarint(b, it.Seq)
	b = binary.AppendVarint(b, it.Created.UnixNano())
	b = binary.AppendVarint(b, nextNanos(it.NextAttempt))
	b = binary.AppendUvarint(b, uint64(it.Attempts))
	b = appendBytes(b, []byte(it.LastError))
	b = appendBytes(b, it.Payload)
	return seal(key, b)
}

// nextNanos stores a zero NextAttempt ("due at once") as 0.
func nextNanos(t time.Time) int64 {
	if t.IsZero() {
		return 0
	}
	return t.UnixNano()
}

func decodeOutbox(notifier string, key, v []byte) (OutboxItem, error) {
	fail := func(err error) (OutboxItem, error) {
		return OutboxItem{}, fmt.Errorf("%w: outbox item %s of notifier %q: %v", ErrCorrupt, seqString(key), notifier, err)
	}
	id, ok := keySeq(key)
	if !ok || id == 0 {
		return fail(fmt.Errorf("key is not a nonzero 8-byte ID"))
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	it := OutboxItem{ID: id, Notifier: notifier}
	it.Seq = d.uvarint("Seq")
	created := d.varint("Created")
	next := d.varint("NextAttempt")
	attempts := d.uvarint("Attempts")
	it.LastError = d.str("LastError", maxReasonLen)
	it.Payload = d.bytes("Payload", maxPayloadLen)
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	switch {
	case it.Seq == 0:
		return fail(fmt.Errorf("Seq: zero"))
	case created <= 0:
		return fail(fmt.Errorf("Created: %d is not a time after 1970", created))
	case next < 0:
		return fail(fmt.Errorf("NextAttempt: %d is before 1970", next))
	case attempts > maxAttempts:
		return fail(fmt.Errorf("Attempts: %d out of range", attempts))
	case len(it.Payload) == 0:
		return fail(fmt.Errorf("Payload: empty"))
	}
	it.Created = nsTime(created)
	if next != 0 {
		it.NextAttempt = nsTime(next)
	}
	it.Attempts = int(attempts)
	return it, nil
}

// checkStoredAlarm applies the RecordAlarms checks to a decoded value.
func checkStoredAlarm(id string, ns int64, payloadField string, payload []byte) (field, reason string) {
	if why := checkName(id); why != "" {
		return "AlarmID", why
	}
	if why := checkTime(nsTime(ns)); why != "" {
		return "Time", why
	}
	if why := checkPayload(payload); why != "" {
		return payloadField, why
	}
	return "", ""
}

func boolFlag(cleared bool) byte {
	if cleared {
		return flagCleared
	}
	return 0
}

// seqString names a sequence key in an error message.
func seqString(k []byte) string {
	if n, ok := keySeq(k); ok {
		return fmt.Sprintf("#%d", n)
	}
	return fmt.Sprintf("key %x", k)
}
