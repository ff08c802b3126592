package store

import (
	"bytes"
	"context"
	"errors"
	"log/slog"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// One AppendReadings call that stores anything is one head record, and
// it holds exactly what was stored (duplicates left out).
func TestHeadRecordPerCall(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true, CompactEvery: -1})
	appendOK(t, s, append(series("pc-a", t0, 10), series("pc-b", t0, 5)...))
	appendOK(t, s, series("pc-a", t0.Add(5*time.Minute), 10)) // 5 repeat the first call
	if _, _, err := s.AppendReadings(context.Background(), series("pc-a", t0, 3)); err != nil {
		t.Fatal(err) // all duplicates: no record
	}
	var sizes []int
	err := s.db.View(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketHeadLog).ForEach(func(k, v []byte) error {
			r, err := decodeHeadRec(k, v, false)
			if err != nil {
				return err
			}
			sizes = append(sizes, r.n)
			return nil
		})
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(sizes) != 2 || sizes[0] != 15 || sizes[1] != 5 {
		t.Fatalf("head records hold %v readings, want [15 5]", sizes)
	}
}

// A reading sent again while its first copy is still in the head, in a
// chunk, or in the same call, is a duplicate; after compaction and a
// reopen too.
func TestHeadDuplicatesAcrossHeadAndChunks(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1})
	ctx := context.Background()
	first := series("pc-a", t0, 20)
	appendOK(t, s, first)
	check := func(when string) {
		t.Helper()
		acc, dup, err := s.AppendReadings(ctx, append(first[:10:10], first[5:15]...))
		if err != nil || acc != 0 || dup != 20 {
			t.Fatalf("%s: accepted %d duplicates %d %v, want 0 and 20", when, acc, dup, err)
		}
	}
	check("in the head")
	compactOK(t, s)
	check("in chunks")
	appendOK(t, s, series("pc-a", t0.Add(20*time.Minute), 5))
	_ = s.Close()
	s = openTest(t, dir, Options{NoSync: true, CompactEvery: -1, keepHead: true})
	check("after a reopen")
	if n := len(scanAll(t, s, "pc-a", time.Time{}, time.Time{})); n != 25 {
		t.Fatalf("%d readings, want 25", n)
	}
}

// FuzzHeadRecord: any bytes under any key either decode into a record
// whose encoding is those bytes again, or are refused with ErrCorrupt;
// nothing panics.
func FuzzHeadRecord(f *testing.F) {
	key := seqKey(7)
	r := reading("pc-a", t0, 1)
	v := encodeReading(timeKey(r.Time), &r)
	f.Add(key, encodeHeadRec(key, map[string][]headVal{"pc-a": {{ns: t0.UnixNano(), val: v}}}))
	f.Add(key, encodeHeadRec(key, map[string][]headVal{"pc-a": {{ns: 1, val: []byte{1}}, {ns: 2, val: nil}}, "pc-b": {{ns: 5, val: v}}}))
	f.Add(seqKey(0), []byte{codecV1, 0, 0, 0, 0, 0})
	f.Fuzz(func(t *testing.T, key, val []byte) {
		rec, err := decodeHeadRec(key, val, false)
		if err != nil {
			if !errors.Is(err, ErrCorrupt) || rec != nil {
				t.Fatalf("error %v (record %v): want ErrCorrupt and no record", err, rec)
			}
			return
		}
		if again := encodeHeadRec(key, rec.by); !bytes.Equal(again, val) {
			t.Fatalf("re-encoded %x, stored %x", again, val)
		}
	})
}

// An hour whose readings are partly compacted (kept rollup) and partly in
// the head log comes back as one row with the figures of all of them; so
// do hours only in the head, and a query that starts or ends inside one.
func TestHourlyAddsHeadToKept(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true, CompactEvery: -1})
	appendOK(t, s, series("pc-a", t0, 30)) // 10:00–10:29
	compactOK(t, s)
	appendOK(t, s, series("pc-a", t0.Add(30*time.Minute), 100)) // 10:30–12:09, in the head
	if headCount(t, s, "pc-a") != 100 {
		t.Fatal("the second part is not in the head: the test would prove nothing")
	}
	compareRollups(t, rollupsAll(t, s, "pc-a", time.Hour), recompute(t, s, "pc-a", time.Hour))
	var got []Rollup
	if err := s.ScanRollups("pc-a", time.Hour, t0.Add(20*time.Minute), t0.Add(125*time.Minute), func(r Rollup) error { got = append(got, r); return nil }); err != nil {
		t.Fatal(err)
	}
	want := []int{40, 60, 5} // 10:20–10:59, 11:00–11:59, 12:00–12:04
	if len(got) != len(want) {
		t.Fatalf("%d rows, want %d", len(got), len(want))
	}
	for i, r := range got {
		if r.Samples != want[i] {
			t.Errorf("row %d (%s): %d samples, want %d", i, r.Start, r.Samples, want[i])
		}
	}
}

// A log of many small records (a poller sending one reading a call) is
// moved by the background pass once it holds compactMaxRecords of them,
// though its readings are far fewer than compactMinLog.
func TestBackgroundCompactionOfManyRecords(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true, CompactEvery: 20 * time.Millisecond})
	rs := series("pc-poll", t0, compactMaxRecords)
	for i := range rs {
		appendOK(t, s, rs[i:i+1])
	}
	deadline := time.Now().Add(10 * time.Second)
	for headCount(t, s, "pc-poll") != 0 {
		if time.Now().After(deadline) {
			t.Fatalf("%d readings in %d records still in the head after 10 s", headCount(t, s, "pc-poll"), compactMaxRecords)
		}
		time.Sleep(10 * time.Millisecond)
	}
	if got := scanAll(t, s, "pc-poll", time.Time{}, time.Time{}); len(got) != compactMaxRecords {
		t.Fatalf("%d readings after the pass, want %d", len(got), compactMaxRecords)
	}
}

// A DP or environment sample re-sent with another value is not stored
// (the first stays) and is logged, in the head and once chunked, as a
// conflicting reading is; the same value re-sent is a quiet duplicate.
func TestSampleConflictsAreLogged(t *testing.T) {
	var logs bytes.Buffer
	s := openTest(t, t.TempDir(), Options{NoSync: true, CompactEvery: -1, Logger: slog.New(slog.NewTextHandler(&logs, nil))})
	ctx := context.Background()
	p := Pressure{Sensor: "dp-asm-gown", Time: t0, Pa: 12.4}
	e := EnvSample{Sensor: "th-asm", Time: t0, Has: EnvTemperature, TemperatureC: 21.3}
	for _, chunked := range []bool{false, true} {
		if _, _, err := s.AppendPressure(ctx, []Pressure{p}); err != nil {
			t.Fatal(err)
		}
		if _, _, err := s.AppendEnvironment(ctx, []EnvSample{e}); err != nil {
			t.Fatal(err)
		}
		if chunked {
			compactOK(t, s)
		}
		logs.Reset()
		q, f := p, e
		q.Pa, f.TemperatureC = -3.5, 25
		if acc, dup, err := s.AppendPressure(ctx, []Pressure{p, q}); err != nil || acc != 0 || dup != 2 {
			t.Fatalf("chunked %v: pressure accepted %d duplicates %d %v", chunked, acc, dup, err)
		}
		if acc, dup, err := s.AppendEnvironment(ctx, []EnvSample{e, f}); err != nil || acc != 0 || dup != 2 {
			t.Fatalf("chunked %v: environment accepted %d duplicates %d %v", chunked, acc, dup, err)
		}
		out := logs.String()
		if strings.Count(out, "stored with another value") != 2 || !strings.Contains(out, "dp-asm-gown") || !strings.Contains(out, "th-asm") {
			t.Fatalf("chunked %v: want one warning for each conflicting sample, got:\n%s", chunked, out)
		}
		p.Time, e.Time = p.Time.Add(time.Minute), e.Time.Add(time.Minute)
	}
}
