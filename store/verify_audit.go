package store

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// seriesID names one series a coverage entry can point into.
type seriesID struct {
	kind byte
	name string
}

// seriesCover counts the records of one series the chain accounts for.
type seriesCover struct {
	base          baseline // from chain-start; base.last −1 when none
	above, before int      // covered records found with key > base.last and ≤ it
}

// auditCheck is the state of one Verify walk over the chain.
type auditCheck struct {
	*verifier
	tx      *bolt.Tx
	chunked *chunkCache // readings moved into chunks
	series  map[seriesID]*seriesCover
	horizon int64 // the latest sweep horizon the chain records
	blind   bool  // an entry could not be read: coverage counts are not trusted
	broken  bool  // a broken link was already reported
	index   *auditIndexCheck
	hours   *auditHoursCheck
}

// audit checks the audit chain: entries numbered 1, 2, 3, … with none
// missing, each hash the link of its content to the one before, entry #1
// the chain start, every entry that covers records finding them unchanged
// (readings below the sweep horizon excepted), every stored reading,
// pressure sample, operating-state change and journal entry covered
// exactly once, and the sweep horizon the one the chain records.
func (v *verifier) audit(tx *bolt.Tx) {
	b := tx.Bucket(bucketAudit)
	if b == nil {
		return
	}
	a := &auditCheck{verifier: v, tx: tx, chunked: newChunkCache(tx, v.hv), series: map[seriesID]*seriesCover{},
		index: &auditIndexCheck{idx: tx.Bucket(bucketAuditIndex), audit: b}, hours: newAuditHoursCheck(tx.Bucket(bucketAuditHours))}
	v.guarded(string(bucketAudit), func() { a.chain(b) })
	v.guarded(string(bucketAuditIndex), func() {
		for _, f := range a.index.faults(a.blind) {
			v.add("%s", f)
		}
		a.hours.finish()
		for _, f := range a.hours.faults {
			v.add("%s", f)
		}
	})
	if !a.blind {
		v.guarded("audit coverage", a.coverage)
	}
	if v.sweptBefore != a.horizon {
		v.add("the sweep horizon %s is not the latest one in the audit chain (%s)", nsTime(v.sweptBefore).Format(time.RFC3339Nano), nsTime(a.horizon).Format(time.RFC3339Nano))
	}
}

// breakAt reports a broken link, naming the first one as such.
func (a *auditCheck) breakAt(seq uint64, at time.Time, format string, args ...any) {
	where := fmt.Sprintf("entry #%d", seq)
	if !at.IsZero() {
		where += " (" + at.Format(time.RFC3339Nano) + ")"
	}
	what := "broken link"
	if !a.broken {
		what = "first broken link"
		a.broken = true
	}
	a.add("audit chain: %s at %s: %s", what, where, fmt.Sprintf(format, args...))
}

func (a *auditCheck) chain(b *bolt.Bucket) {
	var prev [32]byte
	var want uint64 = 1
	c := b.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		seq, ok := keySeq(k)
		if !ok || val == nil {
			a.breakAt(want, time.Time{}, "key %x is not an 8-byte sequence number holding a value", k)
			a.blind = true
			continue
		}
		if seq > want {
			a.breakAt(want, time.Time{}, "entries #%d to #%d are missing (append-only: they were removed)", want, seq-1)
		}
		want = seq + 1
		e, err := decodeAudit(k, val)
		if err != nil {
			a.breakAt(seq, time.Time{}, "%s", trimCorrupt(err))
			a.blind = true
			if len(val) >= 1+32 {
				copy(prev[:], val[1:33])
			}
			continue
		}
		if got := auditLink(prev, seq, auditBody(val)); got != e.Hash {
			a.breakAt(seq, e.Time, "its hash does not match its content and the entry before it (the entry, or one before it, was changed)")
		}
		prev = e.Hash
		a.index.saw(&e)
		a.hours.saw(&e)
		a.entry(&e)
	}
	if issued := b.Sequence(); want-1 < issued {
		a.breakAt(want, time.Time{}, "the chain ends at entry #%d, but %d were issued (append-only: the last entries were removed)", want-1, issued)
	} else if want-1 > issued {
		a.breakAt(want-1, time.Time{}, "entry beyond the %d sequence numbers issued", issued)
	}
}

// entry checks what one entry says about the rest of the file.
func (a *auditCheck) entry(e *AuditEntry) {
	if (e.Seq == 1) != (e.Action == AuditChainStart) {
		a.add("audit entry #%d (%s) is %q: the chain starts with entry #1 only", e.Seq, e.Time.Format(time.RFC3339Nano), e.Action)
	}
	var kind byte
	switch e.Action {
	case AuditChainStart:
		series, horizon, err := decodeChainStart(e.Detail)
		if err != nil {
			a.add("audit entry #%d (chain start): %v", e.Seq, err)
			a.blind = true
			return
		}
		for _, s := range series {
			a.cover(s.kind, s.name).base = s
		}
		a.horizon = max(a.horizon, horizon)
		return
	case AuditEnvStart:
		series, _, err := decodeChainStart(e.Detail)
		if err != nil {
			a.add("audit entry #%d (%s): %v", e.Seq, e.Action, err)
			a.blind = true
			return
		}
		for _, s := range series {
			if s.kind == coverEnv {
				a.cover(s.kind, s.name).base = s
			}
		}
		return
	case AuditSweep:
		if len(e.Detail) < 8 {
			a.add("audit entry #%d (sweep, %s): detail too short", e.Seq, e.Time.Format(time.RFC3339Nano))
			return
		}
		a.horizon = max(a.horizon, int64(binary.BigEndian.Uint64(e.Detail)))
		return
	case AuditReadings:
		kind = coverReadings
	case AuditPressure:
		kind = coverPressure
	case AuditOpState:
		kind = coverOpState
	case AuditEnv:
		kind = coverEnv
	case AuditAlarm:
		kind = coverJournal
	default:
		return
	}
	cv, err := decodeCoverage(e.Detail)
	if err == nil && cv.kind != kind {
		err = fmt.Errorf("covers records of kind %q", cv.kind)
	}
	if err != nil {
		a.add("audit entry #%d (%s, %s): %v", e.Seq, e.Action, e.Time.Format(time.RFC3339Nano), err)
		a.blind = true
		return
	}
	a.records(e, &cv)
}

func (a *auditCheck) cover(kind byte, name string) *seriesCover {
	id := seriesID{kind, name}
	sc := a.series[id]
	if sc == nil {
		sc = &seriesCover{base: baseline{kind: kind, name: name, last: -1}}
		a.series[id] = sc
	}
	return sc
}

// records looks up every record an entry covers and recomputes its
// digest. A record that fails its own checksum is reported by the walk
// of its bucket, so the digest is not compared again; one swept away
// (below the horizon) makes the digest unknowable.
func (a *auditCheck) records(e *AuditEntry, cv *covered) {
	root := a.tx.Bucket(coverBucket(cv.kind))
	h := sha256.New()
	var scratch []byte
	compare := true
	for _, r := range cv.recs {
		name := cv.names[r.name]
		key := seqKey(uint64(r.key))
		var val []byte
		switch cv.kind {
		case coverReadings: // head or chunk, without a bucket lookup per record
			val = a.chunked.value(name, key)
		case coverPressure:
			val = a.chunked.pressure(name, key)
		case coverEnv:
			val = a.chunked.env(name, key)
		case coverJournal:
			val = root.Get(key)
		default:
			if b := root.Bucket([]byte(name)); b != nil {
				val = b.Get(key)
			}
		}
		if val == nil {
			compare = false
			if (cv.kind == coverReadings || cv.kind == coverPressure || cv.kind == coverEnv) && r.key < a.sweptBefore {
				continue
			}
			a.add("audit entry #%d (%s, %s): %s is missing", e.Seq, e.Action, e.Time.Format(time.RFC3339Nano), recordName(cv.kind, name, key))
			continue
		}
		sc := a.cover(cv.kind, name)
		if r.key > sc.base.last {
			sc.above++
		} else {
			sc.before++
		}
		if _, err := unseal(key, val); err != nil {
			compare = false
		}
		scratch = recordDigestInput(scratch[:0], name, key, val)
		h.Write(scratch)
	}
	if compare && !bytes.Equal(h.Sum(nil), cv.digest[:]) {
		a.add("audit entry #%d (%s, %s): the records it covers (%d) were changed after they were stored", e.Seq, e.Action, e.Time.Format(time.RFC3339Nano), len(cv.recs))
	}
}

func recordName(kind byte, name string, key []byte) string {
	switch kind {
	case coverReadings:
		return fmt.Sprintf("reading of counter %q at %s", name, keyString(key))
	case coverPressure:
		return fmt.Sprintf("pressure of sensor %q at %s", name, keyString(key))
	case coverOpState:
		return fmt.Sprintf("operating state of zone %q, entry %s", name, seqString(key))
	case coverEnv:
		return fmt.Sprintf("environment sample of sensor %q at %s", name, keyString(key))
	}
	return "alarm journal entry " + seqString(key)
}

// coverage compares each series' stored records with those the chain
// found: above the chain start's last key they must match one for one;
// before it, the chain start's count bounds those nobody covers.
func (a *auditCheck) coverage() {
	check := func(kind byte, name string, b *bolt.Bucket) {
		sc := a.cover(kind, name)
		var above, before int
		count := func(n int64) {
			if n > sc.base.last {
				above++
			} else {
				before++
			}
		}
		switch kind {
		case coverReadings:
			forEachReadingKey(a.tx, a.chunked.hv, name, count)
		case coverPressure:
			forEachKey(a.tx, bucketPressure, bucketPChunks, name, count)
		case coverEnv:
			forEachKey(a.tx, bucketEnvironment, bucketEChunks, name, count)
		default:
			c := b.Cursor()
			for k, _ := c.First(); k != nil; k, _ = c.Next() {
				n, ok := keyNanos(k)
				if !ok {
					n = -1 << 63
				}
				count(n)
			}
		}
		switch {
		case above > sc.above:
			a.add("%d of %d records in %s are not covered by the audit chain (written outside the store)", above-sc.above, above, seriesName(kind, name))
		case above < sc.above:
			a.add("%d records in %s are covered more than once by the audit chain", sc.above-above, seriesName(kind, name))
		case uint64(before-sc.before) > sc.base.count:
			a.add("%d records in %s older than the audit chain, more than the %d it started with", before-sc.before, seriesName(kind, name), sc.base.count)
		}
	}
	for _, name := range readingCounters(a.tx, a.chunked.hv) {
		check(coverReadings, name, nil)
	}
	for _, name := range pressureSensors(a.tx) {
		check(coverPressure, name, nil)
	}
	for _, name := range envSensors(a.tx) {
		check(coverEnv, name, nil)
	}
	if root := a.tx.Bucket(bucketOpState); root != nil {
		_ = root.ForEachBucket(func(name []byte) error {
			check(coverOpState, string(name), root.Bucket(name))
			return nil
		})
	}
	if j := a.tx.Bucket(bucketJournal); j != nil {
		check(coverJournal, "", j)
	}
}

func seriesName(kind byte, name string) string {
	switch kind {
	case coverReadings:
		return fmt.Sprintf("the readings of counter %q", name)
	case coverPressure:
		return fmt.Sprintf("the pressure of sensor %q", name)
	case coverOpState:
		return fmt.Sprintf("the operating states of zone %q", name)
	case coverEnv:
		return fmt.Sprintf("the environment samples of sensor %q", name)
	}
	return "the alarm journal"
}
