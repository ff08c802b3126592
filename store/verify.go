package store

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"runtime/debug"
	"slices"
	"strings"
	"sync"
	"time"

	bolt "go.etcd.io/bbolt"
)

// maxProblems caps the list Verify returns; a systematic fault would
// otherwise repeat once per record.
const maxProblems = 1000

// Verify checks a store file that no daemon holds open: bbolt's page
// check (tx.Check), then the store's own invariants: the known buckets
// and schema, every key an ordered 8-byte time, every value decoding with
// a matching checksum (counts aligned with sizes), every rollup's sample
// count equal to the readings in its bucket (buckets older than the last
// Sweep excepted), the alarm journal numbered without a gap, the journal,
// the alarm snapshots, their indexes and the outbox agreeing with each
// other (verify_alarm.go), and the audit chain whole, with every record
// it covers unchanged and every record covered (verify_audit.go). path is
// the file or its data directory.
//
// It returns every problem found, at most 1000 listed. The error is for a
// check that could not run: the file missing or held by a daemon
// (ErrLocked: stop it, or verify a copy from Backup), or too damaged to
// open (ErrCorrupt, with the reason also in the list).
func Verify(path string) (problems []string, err error) {
	if info, serr := os.Stat(path); serr == nil && info.IsDir() {
		path = filepath.Join(path, FileName)
	}
	info, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("store: verify: %w", err)
	}
	if info.Size() == 0 {
		err := corruptError(path, errors.New("the file is empty"))
		return []string{"the file is empty"}, err
	}
	db, err := openBolt(path, &bolt.Options{ReadOnly: true, Timeout: DefaultLockTimeout})
	if err != nil {
		if errors.Is(err, ErrLocked) {
			return nil, fmt.Errorf("%w; stop the daemon, or verify a copy made with `cleanmon backup`", err)
		}
		if errors.Is(err, ErrCorrupt) {
			return []string{trimCorrupt(err)}, err
		}
		return nil, err
	}
	defer db.Close()
	if err := checkLength(db, path, info.Size()); err != nil {
		return []string{trimCorrupt(err)}, err
	}
	// Three checks, each in its own read transaction of the one unchanging
	// file and on its own goroutine (a year of a site is minutes of work
	// on one core), reported in this order: bbolt's page check (it
	// recovers its own panics and stops at the first one), the store's
	// records series by series (so the report still says which series
	// are readable), and the audit chain.
	parts := []*verifier{{}, {}, {}}
	var wg sync.WaitGroup
	wg.Go(func() {
		v := parts[0]
		v.guarded("bbolt check", func() {
			_ = db.View(func(tx *bolt.Tx) error {
				for err := range tx.Check() {
					v.add("bbolt: %v", err)
				}
				return nil
			})
		})
	})
	wg.Go(func() { parts[1].guarded("store check", func() { _ = db.View(parts[1].runRecords) }) })
	wg.Go(func() { parts[2].guarded("audit check", func() { _ = db.View(parts[2].runAudit) }) })
	wg.Wait()
	v := &verifier{}
	for _, p := range parts {
		for _, line := range p.problems {
			v.add("%s", line)
		}
		v.dropped += p.dropped
	}
	if v.dropped > 0 {
		v.problems = append(v.problems, fmt.Sprintf("… and %d more problems not listed", v.dropped))
	}
	return v.problems, nil
}

func trimCorrupt(err error) string {
	return strings.TrimPrefix(err.Error(), ErrCorrupt.Error()+": ")
}

type verifier struct {
	problems    []string
	dropped     int
	sweptBefore int64
	hv          *headView // the head log's records, decoded once
}

func (v *verifier) add(format string, args ...any) {
	if len(v.problems) >= maxProblems {
		v.dropped++
		return
	}
	v.problems = append(v.problems, fmt.Sprintf(format, args...))
}

func (v *verifier) addErr(err error) {
	if errors.Is(err, ErrCorrupt) {
		v.add("%s", trimCorrupt(err))
		return
	}
	v.add("%v", err)
}

// guarded runs fn, reporting a panic or memory fault (a damaged page) as
// a problem of where.
func (v *verifier) guarded(where string, fn func()) {
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		if r := recover(); r != nil {
			v.add("%s: reading its pages failed: %v", where, r)
		}
	}()
	fn()
}

// run checks everything in tx: the records, then the audit chain.
func (v *verifier) run(tx *bolt.Tx) error {
	_ = v.runRecords(tx)
	v.audit(tx)
	return nil
}

// runAudit is the audit chain's part of run alone, for a verifier of its
// own that runs beside runRecords (Verify uses both cores).
func (v *verifier) runAudit(tx *bolt.Tx) error {
	if meta := tx.Bucket(bucketMeta); meta != nil {
		v.sweptBefore, _ = keyNanos(meta.Get(metaSweptBefore)) // a bad horizon is runRecords' to report
	}
	v.hv = &headView{tx: tx}
	func() {
		defer func() { _ = recover() }() // a damaged page here is runRecords' to report
		v.hv, _ = lenientHead(tx)
	}()
	v.audit(tx)
	return nil
}

// runRecords is run without the audit chain.
func (v *verifier) runRecords(tx *bolt.Tx) error {
	known := map[string]bool{}
	for _, name := range knownBuckets {
		known[string(name)] = true
		if tx.Bucket(name) == nil && !v.olderLayout(tx, name) {
			v.add("bucket %q is missing", name)
		}
	}
	if v.schema(tx) == 1 {
		// A file of the previous version (an old backup): its minute
		// rollups are its own; Open upgrades it, Verify reads it as it is.
		known[string(bucketRollup1m)] = true
		v.walk(tx, bucketRollup1m, func(name string, k, val []byte) error {
			_, err := decodeRollup(name, time.Minute, k, val)
			return err
		})
	}
	_ = tx.ForEach(func(name []byte, _ *bolt.Bucket) error {
		if !known[string(name)] {
			v.add("unknown top-level bucket %q", name)
		}
		return nil
	})
	if meta := tx.Bucket(bucketMeta); meta != nil {
		if err := checkSchema(meta); err != nil {
			v.add("meta: %v", err)
		}
		if raw := meta.Get(metaSweptBefore); raw != nil {
			ns, ok := keyNanos(raw)
			if !ok {
				v.add("meta: sweep horizon %x is not an 8-byte time", raw)
			}
			v.sweptBefore = ns
		}
	}
	v.walk(tx, bucketReadings, func(name string, k, val []byte) error {
		_, err := decodeReading(name, k, val)
		return err
	})
	v.hv = &headView{tx: tx}
	v.headLog(tx)
	v.chunks(tx)
	v.pchunks(tx)
	v.echunks(tx) // verify_echunk.go
	v.walk(tx, bucketEnvironment, func(name string, k, val []byte) error {
		_, err := decodeEnv(name, k, val)
		return err
	})
	v.walk(tx, bucketPressure, func(name string, k, val []byte) error {
		_, err := decodePressure(name, k, val)
		return err
	})
	v.walk(tx, bucketOpState, func(name string, k, val []byte) error {
		_, err := decodeOpState(name, k, val)
		return err
	})
	for _, st := range rollupSteps {
		step := st.step
		v.walk(tx, st.bucket, func(name string, k, val []byte) error {
			_, err := decodeRollup(name, step, k, val)
			return err
		})
		v.guarded(fmt.Sprintf("%s against readings", st.bucket), func() { v.rollupCounts(tx, st.bucket, step) })
		v.guarded(fmt.Sprintf("%s values against readings", st.bucket), func() { v.rollupValues(tx, st.bucket, step) })
	}
	v.alarms(tx)
	return nil
}

// schema is the file's schema version, 0 when it cannot be read.
func (v *verifier) schema(tx *bolt.Tx) uint64 {
	meta := tx.Bucket(bucketMeta)
	if meta == nil {
		return 0
	}
	ver, n := binary.Uvarint(meta.Get(metaSchema))
	if n <= 0 {
		return 0
	}
	return ver
}

// olderLayout reports whether a missing bucket is one a schema-1 file
// never had.
func (v *verifier) olderLayout(tx *bolt.Tx, name []byte) bool {
	if bytes.Equal(name, bucketAuditSig) { // files written before signing was known have no signatures
		return true
	}
	if bytes.Equal(name, bucketAuditIndex) || bytes.Equal(name, bucketAuditHours) { // derived from the chain: built at the first writable open
		return true
	}
	// Files before schema 3 keep their head one value per reading and
	// their environment samples unchunked; Open adds both buckets.
	if bytes.Equal(name, bucketHeadLog) || bytes.Equal(name, bucketEChunks) {
		return v.schema(tx) < 3
	}
	return v.schema(tx) == 1 && (bytes.Equal(name, bucketChunks) || bytes.Equal(name, bucketEnvironment) || bytes.Equal(name, bucketPChunks) ||
		bytes.Equal(name, bucketRuns) || bytes.Equal(name, bucketAccounts))
}

// walk checks the layout of one kind: nested buckets only, each holding
// values under strictly ascending 8-byte keys that decode.
func (v *verifier) walk(tx *bolt.Tx, kind []byte, decode func(name string, k, val []byte) error) {
	root := tx.Bucket(kind)
	if root == nil {
		return
	}
	v.guarded(string(kind), func() { v.walkKind(root, kind, decode) })
}

func (v *verifier) walkKind(root *bolt.Bucket, kind []byte, decode func(name string, k, val []byte) error) {
	_ = root.ForEach(func(name, val []byte) error {
		if val != nil {
			v.add("%s: entry %q is a value, not a bucket", kind, name)
			return nil
		}
		if why := checkName(string(name)); why != "" {
			v.add("%s: bucket name %q: %s", kind, name, why)
		}
		v.guarded(fmt.Sprintf("%s/%s", kind, name), func() { v.walkSeries(kind, name, root.Bucket(name), decode) })
		return nil
	})
}

func (v *verifier) walkSeries(kind, name []byte, b *bolt.Bucket, decode func(name string, k, val []byte) error) {
	var prev []byte
	c := b.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		switch {
		case val == nil:
			v.add("%s/%s: %s is a bucket, not a value", kind, name, keyString(k))
			continue
		case len(k) != 8:
			v.add("%s/%s: key %x is not 8 bytes", kind, name, k)
			continue
		case prev != nil && bytes.Compare(k, prev) <= 0:
			v.add("%s/%s: key %s does not follow %s", kind, name, keyString(k), keyString(prev))
		}
		prev = append(prev[:0], k...)
		if err := decode(string(name), k, val); err != nil {
			v.addErr(err)
		}
	}
}

// rollupCounts compares every rollup bucket's sample count with the
// readings that fall in it, in both directions.
func (v *verifier) rollupCounts(tx *bolt.Tx, kind []byte, step time.Duration) {
	rollups := tx.Bucket(kind)
	if tx.Bucket(bucketReadings) == nil || rollups == nil {
		return
	}
	samples := func(b *bolt.Bucket, start int64) (uint64, bool) {
		if b == nil {
			return 0, false
		}
		key := nanosKey(start)
		raw := b.Get(key)
		if raw == nil {
			return 0, false
		}
		body, err := unseal(key, raw)
		if err != nil || len(body) < 2 {
			return 0, false // reported by walk
		}
		d := decoder{b: body[1:]}
		n := d.uvarint("Samples")
		return n, d.err == nil
	}
	names := readingCounters(tx, nil) // the head log is not rolled up yet
	for _, name := range names {
		rb := rollups.Bucket([]byte(name))
		counts := map[int64]uint64{}
		forEachReadingKey(tx, nil, name, func(ns int64) { counts[ns-ns%int64(step)]++ })
		starts := make([]int64, 0, len(counts))
		for start := range counts {
			starts = append(starts, start)
		}
		slices.Sort(starts)
		for _, start := range starts {
			if start < v.sweptBefore {
				continue
			}
			count := counts[start]
			got, ok := samples(rb, start)
			switch {
			case !ok && (rb == nil || rb.Get(nanosKey(start)) == nil):
				v.add("%s rollup of counter %q at %s is missing (%d readings)", step, name, keyString(nanosKey(start)), count)
			case ok && got != count:
				v.add("%s rollup of counter %q at %s counts %d samples, the bucket holds %d readings", step, name, keyString(nanosKey(start)), got, count)
			}
		}
		if rb == nil {
			continue
		}
		c := rb.Cursor()
		for k, _ := c.First(); k != nil; k, _ = c.Next() {
			if start, ok := keyNanos(k); ok && start >= v.sweptBefore && counts[start] == 0 {
				v.add("%s rollup of counter %q at %s has no readings in its bucket", step, name, keyString(k))
			}
		}
	}
	_ = rollups.ForEachBucket(func(name []byte) error {
		if slices.Contains(names, string(name)) {
			return nil
		}
		c := rollups.Bucket(name).Cursor()
		for k, _ := c.First(); k != nil; k, _ = c.Next() {
			if start, ok := keyNanos(k); ok && start >= v.sweptBefore {
				v.add("%s rollup of counter %q at %s has no readings in its bucket", step, name, keyString(k))
			}
		}
		return nil
	})
}
