package store

import (
	"bytes"
	"os"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// verifyFixture is a closed store with readings, pressure, rollups,
// operating state, the alarms of alarmStory and their outbox items, and
// the audit entries of all that, ending with a configuration load.
func verifyFixture(t *testing.T) string {
	t.Helper()
	return verifyFixtureOpt(t, Options{NoSync: true, keepHead: true})
}

// verifyFixtureOpt is verifyFixture with options: without keepHead, every
// reading ends in a chunk.
func verifyFixtureOpt(t *testing.T, opt Options) string {
	t.Helper()
	s := openTest(t, t.TempDir(), opt)
	appendOK(t, s, series("pc-asm-1", t0, 300))
	met := series("pc-met", t0, 50)
	for i := range met {
		met[i].VolumeL, met[i].FlowLPM = 2.83, 2.83 // its 2.83 L/min (the invented demo site)
	}
	appendOK(t, s, met)
	ctx := t.Context()
	if _, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp-asm-gown", Time: t0, Pa: 12.4}, {Sensor: "dp-asm-gown", Time: t0.Add(time.Minute), Pa: 9.8}}); err != nil {
		t.Fatal(err)
	}
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: StateInOperation, By: "op", Reason: "shift", Time: t0}); err != nil {
		t.Fatal(err)
	}
	// Journal entries #1…#6; outbox items 1, 2, 3 are record #1's for
	// webhook, alertmanager, log.
	for _, call := range alarmStory() {
		recordOK(t, s, call, notifierNames)
	}
	if _, _, err := s.AppendAudit(ctx, configLoadEntry()); err != nil {
		t.Fatal(err)
	}
	path := s.Path()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestVerifyGoodFile(t *testing.T) {
	path := verifyFixture(t)
	problems, err := Verify(path)
	if err != nil || len(problems) != 0 {
		t.Fatalf("Verify(good file) = %q, %v", problems, err)
	}
	if _, err := Verify(t.TempDir() + "/missing.db"); err == nil {
		t.Fatal("Verify of a missing file did not fail")
	}
}

func rawValue(t *testing.T, path string, bucket [][]byte, key []byte) []byte {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var out []byte
	_ = db.View(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucket[0])
		for _, n := range bucket[1:] {
			b = b.Bucket(n)
		}
		out = append([]byte(nil), b.Get(key)...)
		return nil
	})
	if out == nil {
		t.Fatalf("no value at %q %x", bucket, key)
	}
	return out
}

// flipValue flips a bit in the middle of val wherever it is in the file:
// the value may also survive in freed pages, so every copy is hit to be
// sure the live one is.
func flipValue(t *testing.T, path string, val []byte) {
	t.Helper()
	file, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	hits := 0
	for off := 0; ; {
		i := bytes.Index(file[off:], val)
		if i < 0 {
			break
		}
		file[off+i+len(val)/2] ^= 0x10
		off += i + len(val)
		hits++
	}
	if hits == 0 {
		t.Fatal("value not found in the file")
	}
	if err := os.WriteFile(path, file, 0o600); err != nil {
		t.Fatal(err)
	}
}

func TestVerifyFlippedByte(t *testing.T) {
	cases := []struct {
		name   string
		bucket [][]byte
		key    []byte
		want   string
	}{
		// The first head record holds pc-asm-1's 300 readings: a byte
		// flipped in it lands in one of them, named by its own checksum.
		{"head reading", [][]byte{bucketHeadLog}, seqKey(1), `reading of counter "pc-asm-1" at`},
		// Rollups are kept for compacted readings: this case's fixture is
		// compacted (keepHead unset), see below.
		{"hour rollup", [][]byte{bucketRollup1h, []byte("pc-met")}, nanosKey(t0.UnixNano()), `1h0m0s rollup of counter "pc-met" at 2026-03-02T10:00:00Z: checksum mismatch`},
		{"pressure", [][]byte{bucketPressure, []byte("dp-asm-gown")}, timeKey(t0.Add(time.Minute)), `pressure of sensor "dp-asm-gown" at 2026-03-02T10:01:00Z: checksum mismatch`},
		{"operating state", [][]byte{bucketOpState, []byte("assembly")}, nanosKey(1), `operating state of zone "assembly"`},
		{"alarm journal entry", [][]byte{bucketJournal}, seqKey(2), `alarm journal entry #2: checksum mismatch`},
		{"alarm journal time index", [][]byte{bucketJournalAt}, pairKey(t0.Add(time.Second).UnixNano(), seqKey(2)), `alarm_journal_time: entry for #2 at 2026-03-02T10:00:01Z: checksum mismatch`},
		{"alarm snapshot", [][]byte{bucketAlarms}, []byte("a-2"), `snapshot of alarm "a-2": checksum mismatch`},
		{"alarm update index", [][]byte{bucketAlarmsAt}, pairKey(t0.Add(2*time.Minute).UnixNano(), []byte("a-2")), `alarms_updated: entry for alarm "a-2" at 2026-03-02T10:02:00Z: checksum mismatch`},
		{"outbox item", [][]byte{bucketOutbox, []byte("alertmanager")}, seqKey(2), `outbox item #2 of notifier "alertmanager": checksum mismatch`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := verifyFixture(t)
			if c.name == "hour rollup" {
				path = verifyFixtureOpt(t, Options{NoSync: true})
			}
			flipValue(t, path, rawValue(t, path, c.bucket, c.key))
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(problems) != 1 || !strings.Contains(problems[0], c.want) {
				t.Fatalf("problems %q, want one naming %q", problems, c.want)
			}
		})
	}
}

func TestVerifyInvariants(t *testing.T) {
	hour := nanosKey(t0.UnixNano())
	// Cases about rollups run on a compacted fixture: rollups are kept
	// for what compaction moved into chunks.
	cases := []struct {
		name   string
		change func(tx *bolt.Tx) error
		want   string
	}{
		{"rollup count off by one", func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketRollup1h).Bucket([]byte("pc-asm-1"))
			acc, err := decodeRollup("pc-asm-1", time.Hour, hour, b.Get(hour))
			if err != nil {
				return err
			}
			acc.samples++
			return b.Put(hour, encodeRollup(hour, acc))
		}, `1h0m0s rollup of counter "pc-asm-1" at 2026-03-02T10:00:00Z counts 61 samples, the bucket holds 60 readings`},
		{"reading deleted behind the rollups' back", func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketChunks).Bucket([]byte("pc-met"))
			k, v := b.Cursor().First()
			rs, _, err := decodeChunk("pc-met", k, v)
			if err != nil {
				return err
			}
			k = bytes.Clone(k)
			rs = append(rs[:5:5], rs[6:]...) // 10:05
			return b.Put(k, encodeChunk(k, rs))
		}, `1h0m0s rollup of counter "pc-met" at 2026-03-02T10:00:00Z counts 50 samples, the bucket holds 49 readings`},
		{"rollup missing", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketRollup1h).Bucket([]byte("pc-met")).Delete(hour)
		}, `1h0m0s rollup of counter "pc-met" at 2026-03-02T10:00:00Z is missing (50 readings)`},
		{"short key", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketPressure).Bucket([]byte("dp-asm-gown")).Put([]byte{1, 2, 3}, []byte{1})
		}, `pressure/dp-asm-gown: key 010203 is not 8 bytes`},
		{"value where a series bucket belongs", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketReadings).Put([]byte("stray"), []byte{1})
		}, `readings: entry "stray" is a value, not a bucket`},
		{"unknown top-level bucket", func(tx *bolt.Tx) error {
			_, err := tx.CreateBucket([]byte("scratch"))
			return err
		}, `unknown top-level bucket "scratch"`},
		{"journal entry removed", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketJournal).Delete(seqKey(2))
		}, `alarm journal entry #2 is missing (append-only: it was removed)`},
		{"last journal entries removed", func(tx *bolt.Tx) error {
			j := tx.Bucket(bucketJournal)
			if err := j.Delete(seqKey(6)); err != nil {
				return err
			}
			return j.Delete(seqKey(5))
		}, `alarm journal ends at entry #4, but 6 sequence numbers were issued`},
		{"journal entry without its time index entry", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketJournalAt).Delete(pairKey(t0.Add(time.Minute).UnixNano(), seqKey(3)))
		}, `alarm journal entry #3 at 2026-03-02T10:01:00Z has no time index entry`},
		{"journal entry rewritten with another time", func(tx *bolt.Tx) error {
			e := journalEntry{seq: 3, ns: t0.Add(time.Hour).UnixNano(), alarmID: "a-1", entry: []byte("{}")}
			return tx.Bucket(bucketJournal).Put(seqKey(3), encodeJournal(seqKey(3), &e))
		}, `alarm_journal_time: entry for #3 at 2026-03-02T10:01:00Z, the journal entry says 2026-03-02T11:00:00Z`},
		{"snapshot left behind by the journal", func(tx *bolt.Tx) error {
			a := alarmSnapshot{id: "a-1", ns: t0.UnixNano(), seq: 1, snapshot: []byte("{}")}
			return tx.Bucket(bucketAlarms).Put([]byte("a-1"), encodeSnapshot([]byte("a-1"), &a))
		}, `snapshot of alarm "a-1" is from journal entry #1, the alarm's latest entry is #5`},
		{"open alarm's snapshot removed", func(tx *bolt.Tx) error {
			if err := tx.Bucket(bucketAlarmsAt).Delete(pairKey(t0.Add(4*time.Minute).UnixNano(), []byte("a-3"))); err != nil {
				return err
			}
			return tx.Bucket(bucketAlarms).Delete([]byte("a-3"))
		}, `alarm "a-3" is open in the journal (entry #6) but has no snapshot`},
		{"cleared alarm's snapshot removed without a sweep", func(tx *bolt.Tx) error {
			if err := tx.Bucket(bucketAlarmsAt).Delete(pairKey(t0.Add(3*time.Minute).UnixNano(), []byte("a-1"))); err != nil {
				return err
			}
			return tx.Bucket(bucketAlarms).Delete([]byte("a-1"))
		}, `cleared alarm "a-1" (journal entry #5 at 2026-03-02T10:03:00Z) has no snapshot, and no Sweep reached it`},
		{"update index entry without its snapshot", func(tx *bolt.Tx) error {
			k := pairKey(t0.UnixNano(), []byte("ghost"))
			return tx.Bucket(bucketAlarmsAt).Put(k, indexMark(k))
		}, `alarms_updated: entry for alarm "ghost" at 2026-03-02T10:00:00Z names no snapshot`},
		{"outbox item announcing another record", func(tx *bolt.Tx) error {
			q := tx.Bucket(bucketOutbox).Bucket([]byte("log"))
			it, err := decodeOutbox("log", seqKey(3), q.Get(seqKey(3)))
			if err != nil {
				return err
			}
			it.Seq = 4
			return q.Put(seqKey(3), encodeOutbox(seqKey(3), &it))
		}, `outbox item #3 of notifier "log" differs from journal entry #4 it announces`},
		{"outbox item copied to another queue", func(tx *bolt.Tx) error {
			ob := tx.Bucket(bucketOutbox)
			v := append([]byte(nil), ob.Bucket([]byte("webhook")).Get(seqKey(1))...)
			return ob.Bucket([]byte("log")).Put(seqKey(1), v)
		}, `outbox item #1 is queued for both "log" and "webhook"`},
		{"outbox item ID not issued", func(tx *bolt.Tx) error {
			q := tx.Bucket(bucketOutbox).Bucket([]byte("log"))
			it, err := decodeOutbox("log", seqKey(3), q.Get(seqKey(3)))
			if err != nil {
				return err
			}
			return q.Put(seqKey(500), encodeOutbox(seqKey(500), &it))
		}, `outbox item #500 of notifier "log" was not issued by the outbox (last ID 18)`},
		{"value where a notifier's queue belongs", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketOutbox).Put([]byte("stray"), []byte{1})
		}, `outbox: entry "stray" is a value, not a notifier's queue`},
		{"value copied under another key", func(tx *bolt.Tx) error {
			b := headOf(tx, "pc-asm-1")
			v := append([]byte(nil), b.Get(timeKey(t0))...)
			return b.Put(timeKey(t0.Add(time.Minute)), v)
		}, `reading of counter "pc-asm-1" at 2026-03-02T10:01:00Z: checksum mismatch`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := verifyFixture(t)
			if strings.Contains(c.name, "rollup") {
				path = verifyFixtureOpt(t, Options{NoSync: true})
			}
			db, err := bolt.Open(path, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := db.Update(c.change); err != nil {
				t.Fatal(err)
			}
			_ = db.Close()
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			found := false
			for _, p := range problems {
				found = found || strings.Contains(p, c.want)
			}
			if !found {
				t.Fatalf("problems %q, want one containing %q", problems, c.want)
			}
		})
	}
}

func TestVerifyDamagedFile(t *testing.T) {
	_, path, size := damagedFixture(t)
	if err := os.Truncate(path, size/2); err != nil {
		t.Fatal(err)
	}
	problems, err := Verify(path)
	wantErr(t, err, ErrCorrupt)
	if len(problems) != 1 || !strings.Contains(problems[0], "truncated") {
		t.Fatalf("problems %q", problems)
	}
}
