package store

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

func compactOK(t testing.TB, s *Store) CompactResult {
	t.Helper()
	res, err := s.Compact(context.Background())
	if err != nil {
		t.Fatalf("Compact: %v", err)
	}
	return res
}

func headCount(t testing.TB, s *Store, counter string) int {
	t.Helper()
	n := 0
	_ = s.db.View(func(tx *bolt.Tx) error {
		if b := tx.Bucket(bucketReadings).Bucket([]byte(counter)); b != nil {
			n = b.Stats().KeyN
		}
		n += len(viewHead(tx, nil).logValues(counter, math.MinInt64, math.MaxInt64))
		return nil
	})
	return n
}

// TestQueryAtChunkAndHeadBoundaries builds a counter with full chunks, a
// partial last chunk and head readings on both sides of it (late ones
// included), then asks for ranges that start and end on every boundary:
// each reading in range comes back once, in order.
func TestQueryAtChunkAndHeadBoundaries(t *testing.T) {
	s := quick(t)
	all := series("pc-asm-1", t0, 2*maxChunkReadings+300)
	appendOK(t, s, all[:len(all)-200])
	if res := compactOK(t, s); res.Readings != len(all)-200 || res.Chunks != 3 {
		t.Fatalf("compaction moved %+v", res)
	}
	// Late readings between chunked ones (odd seconds), then new ones.
	var late []Reading
	for i := 100; i < 110; i++ {
		late = append(late, reading("pc-asm-1", all[i].Time.Add(time.Second), 7))
	}
	appendOK(t, s, late)
	appendOK(t, s, all[len(all)-200:])
	if n := headCount(t, s, "pc-asm-1"); n != 210 {
		t.Fatalf("head holds %d readings, want 210", n)
	}
	want := append(append([]Reading(nil), all...), late...)
	sortReadings(want)
	edges := []time.Time{
		time.Time{}, t0, all[1].Time, all[100].Time, all[100].Time.Add(time.Second),
		all[maxChunkReadings-1].Time, all[maxChunkReadings].Time, all[2*maxChunkReadings].Time,
		all[len(all)-201].Time, all[len(all)-200].Time, all[len(all)-1].Time, all[len(all)-1].Time.Add(time.Nanosecond),
	}
	check := func(stage string) {
		for _, from := range edges {
			for _, to := range edges {
				if !to.IsZero() && !from.IsZero() && !to.After(from) {
					continue
				}
				got := scanAll(t, s, "pc-asm-1", from, to)
				var exp []Reading
				for _, r := range want {
					if (from.IsZero() || !r.Time.Before(from)) && (to.IsZero() || r.Time.Before(to)) {
						exp = append(exp, r)
					}
				}
				if len(got) != len(exp) {
					t.Fatalf("%s: [%s, %s): %d readings, want %d", stage, from, to, len(got), len(exp))
				}
				for i := range exp {
					if !reflect.DeepEqual(got[i], exp[i]) {
						t.Fatalf("%s: [%s, %s) reading %d: %+v, want %+v", stage, from, to, i, got[i], exp[i])
					}
				}
			}
		}
	}
	check("head and chunks")
	compactOK(t, s)
	if n := headCount(t, s, "pc-asm-1"); n != 0 {
		t.Fatalf("head holds %d readings after compaction", n)
	}
	check("all chunked")
	for _, step := range []time.Duration{time.Minute, time.Hour} {
		compareRollups(t, rollupsAll(t, s, "pc-asm-1", step), recompute(t, s, "pc-asm-1", step))
	}
	if r, ok, err := s.LatestReading("pc-asm-1"); err != nil || !ok || !r.Time.Equal(all[len(all)-1].Time) {
		t.Fatalf("latest %v %v %v", r.Time, ok, err)
	}
}

func sortReadings(rs []Reading) {
	for i := 1; i < len(rs); i++ {
		for j := i; j > 0 && rs[j].Time.Before(rs[j-1].Time); j-- {
			rs[j], rs[j-1] = rs[j-1], rs[j]
		}
	}
}

// TestDuplicatesOfChunkedReadings: a reading already moved into a chunk
// is still a duplicate (same content) or a conflict (other content).
func TestDuplicatesOfChunkedReadings(t *testing.T) {
	s := quick(t)
	rs := series("pc-gown", t0, 500)
	appendOK(t, s, rs)
	compactOK(t, s)
	other := rs[17]
	other.Counts = []uint64{1, 1, 1, 1}
	out, err := s.AppendReadingsMarked(context.Background(), []Reading{rs[3], other, reading("pc-gown", rs[3].Time.Add(time.Second), 5)})
	if err != nil {
		t.Fatal(err)
	}
	if want := []Outcome{Duplicate, Conflict, Stored}; !reflect.DeepEqual(out, want) {
		t.Fatalf("outcomes %v, want %v", out, want)
	}
	// The reading stored at rs[3]+1 s sits before rs[17]: it is #18.
	if got := scanAll(t, s, "pc-gown", time.Time{}, time.Time{}); len(got) != 501 || !reflect.DeepEqual(got[18], rs[17]) {
		t.Fatalf("%d readings, #18 %+v", len(got), got[18])
	}
}

// TestCompactionFailureChangesNothing fails a compaction transaction after
// it wrote its chunks and before the head values went: the rollback
// leaves every reading once, in the head, and the file verifies.
func TestCompactionFailureChangesNothing(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1, keepHead: true})
	for _, c := range []string{"pc-1", "pc-2", "pc-3"} {
		appendOK(t, s, series(c, t0, 700))
	}
	boom := errors.New("power cut")
	compactHook = func(counter string) error {
		if counter == "pc-2" {
			return boom
		}
		return nil
	}
	defer func() { compactHook = nil }()
	if _, err := s.Compact(context.Background()); !errors.Is(err, boom) {
		t.Fatalf("Compact: %v, want the injected failure", err)
	}
	compactHook = nil
	for _, c := range []string{"pc-1", "pc-2", "pc-3"} {
		if n := headCount(t, s, c); n != 700 {
			t.Fatalf("%s: %d head readings after a failed compaction", c, n)
		}
		if got := scanAll(t, s, c, time.Time{}, time.Time{}); len(got) != 700 {
			t.Fatalf("%s: %d readings", c, len(got))
		}
	}
	compactOK(t, s)
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
}

// TestCompactionKilled kills a child process (SIGKILL, no clean-up) inside
// compaction transactions at several points, then checks in the parent
// that every acknowledged reading is there once and the file verifies.
func TestCompactionKilled(t *testing.T) {
	if os.Getenv("CLEANMON_COMPACT_CHILD") != "" {
		compactChild()
		return
	}
	if testing.Short() {
		t.Skip("starts child processes")
	}
	counters := []string{"pc-1", "pc-2", "pc-3", "pc-4"}
	// Three counters fill one compaction transaction, the fourth another.
	const perCounter = compactTxReadings/3 + 1000
	for _, killAt := range []int{1, 2, 3, 4} {
		t.Run(fmt.Sprint("kill at counter ", killAt), func(t *testing.T) {
			dir := t.TempDir()
			s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1, keepHead: true})
			for _, c := range counters {
				appendOK(t, s, series(c, t0, perCounter))
			}
			_ = s.Close()
			cmd := exec.Command(os.Args[0], "-test.run=^TestCompactionKilled$", "-test.count=1")
			cmd.Env = append(os.Environ(), "CLEANMON_COMPACT_CHILD="+dir, "CLEANMON_COMPACT_KILL_AT="+strconv.Itoa(killAt))
			out, err := cmd.CombinedOutput()
			var ee *exec.ExitError
			if !errors.As(err, &ee) || ee.ProcessState.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
				t.Fatalf("child was not killed: %v\n%s", err, out)
			}
			s = openTest(t, dir, Options{CompactEvery: -1, keepHead: true})
			for _, c := range counters {
				got := scanAll(t, s, c, time.Time{}, time.Time{})
				if len(got) != perCounter {
					t.Fatalf("%s: %d readings after the kill, want %d", c, len(got), perCounter)
				}
				for i := 1; i < len(got); i++ {
					if !got[i].Time.After(got[i-1].Time) {
						t.Fatalf("%s: reading %d repeats or goes back", c, i)
					}
				}
			}
			_ = s.Close()
			if p, err := Verify(dir); err != nil || len(p) != 0 {
				t.Fatalf("Verify after the kill: %q %v", p, err)
			}
		})
	}
}

// compactChild compacts the store and kills itself inside the
// transaction that moves the killAt-th counter. Compaction transactions
// bound the readings they move, so earlier counters are committed by then.
func compactChild() {
	dir := os.Getenv("CLEANMON_COMPACT_CHILD")
	killAt, _ := strconv.Atoi(os.Getenv("CLEANMON_COMPACT_KILL_AT"))
	s, err := Open(dir, Options{CompactEvery: -1})
	if err != nil {
		fmt.Println(err)
		os.Exit(3)
	}
	n := 0
	compactHook = func(string) error {
		n++
		if n == killAt {
			_ = syscall.Kill(os.Getpid(), syscall.SIGKILL)
			time.Sleep(time.Minute)
		}
		return nil
	}
	_, err = s.Compact(context.Background())
	fmt.Println("compaction ended without being killed:", err)
	os.Exit(4)
}

// TestTamperAfterCompaction: once readings live in chunks, a reading
// changed, removed or added behind the store's back is still found by
// Verify and named.
func TestTamperAfterCompaction(t *testing.T) {
	at := t0.Add(42 * time.Minute)
	rewrite := func(counter string, edit func([]chunkReading) []chunkReading) func(tx *bolt.Tx) error {
		return func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketChunks).Bucket([]byte(counter))
			k, v := b.Cursor().First()
			rs, _, err := decodeChunk(counter, k, v)
			if err != nil {
				return err
			}
			for i := range rs {
				rs[i].shape = append([]byte(nil), rs[i].shape...)
			}
			k = append([]byte(nil), k...)
			rs = edit(rs)
			if err := b.Delete(k); err != nil {
				return err
			}
			nk := nanosKey(rs[len(rs)-1].ns)
			return b.Put(nk, encodeChunk(nk, rs))
		}
	}
	cases := []struct {
		name   string
		change func(tx *bolt.Tx) error
		want   string
	}{
		{"reading changed, chunk re-encoded", rewrite("pc-asm-1", func(rs []chunkReading) []chunkReading {
			for i := range rs {
				if rs[i].ns == at.UnixNano() {
					rs[i].counts[1] /= 2
				}
			}
			return rs
		}), `: the records it covers (300) were changed after they were stored`},
		{"reading removed", rewrite("pc-met", func(rs []chunkReading) []chunkReading {
			return append(rs[:7], rs[8:]...)
		}), `reading of counter "pc-met" at 2026-03-02T10:07:00Z is missing`},
		{"reading added", rewrite("pc-met", func(rs []chunkReading) []chunkReading {
			extra := rs[0]
			extra.ns -= int64(time.Hour)
			return append([]chunkReading{extra}, rs...)
		}), `1 of 51 records in the readings of counter "pc-met" are not covered by the audit chain`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := verifyFixtureOpt(t, Options{NoSync: true})
			rawUpdate(t, path, c.change)
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			if !containsProblem(problems, c.want) {
				t.Fatalf("problems %q, want one containing %q", problems, c.want)
			}
		})
	}
	t.Run("byte flipped in a chunk", func(t *testing.T) {
		path := verifyFixtureOpt(t, Options{NoSync: true})
		var val []byte
		rawUpdate(t, path, func(tx *bolt.Tx) error {
			_, v := tx.Bucket(bucketChunks).Bucket([]byte("pc-asm-1")).Cursor().First()
			val = append([]byte(nil), v...)
			return nil
		})
		// Flip the low bit of the last count delta, just before the
		// tags: the last reading's last channel changes, no other.
		file, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		off := strings.Index(string(file), string(val))
		if off < 0 {
			t.Fatal("chunk not found in the file")
		}
		tagStart := len(val) - crcLen - 300
		file[off+tagStart-1] ^= 0x01
		if err := os.WriteFile(path, file, 0o600); err != nil {
			t.Fatal(err)
		}
		problems, err := Verify(path)
		if err != nil {
			t.Fatal(err)
		}
		if !containsProblem(problems, `reading of counter "pc-asm-1" at 2026-03-02T14:59:00Z: changed after it was stored`) {
			t.Fatalf("problems %q, want the last reading named", problems)
		}
	})
}

func containsProblem(problems []string, want string) bool {
	for _, p := range problems {
		if strings.Contains(p, want) {
			return true
		}
	}
	return false
}

// TestSchema1StoreOpens opens the store a schema-1 program wrote
// (testdata/v1, one value per reading, minute rollups): it is upgraded in
// place after a backup, reads back every reading and sample it was given,
// verifies clean, and still does after its readings move into chunks.
func TestSchema1StoreOpens(t *testing.T) {
	// An old file (an old backup, say) verifies as it is, untouched.
	if p, err := Verify(v1FixtureDir); err != nil || len(p) != 0 {
		t.Fatalf("Verify of the schema-1 file: %q %v", p, err)
	}
	dir := t.TempDir()
	raw, err := os.ReadFile(filepath.Join(v1FixtureDir, FileName))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, FileName), raw, 0o600); err != nil {
		t.Fatal(err)
	}
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1})
	baks, _ := filepath.Glob(filepath.Join(dir, FileName+".schema1-*.bak"))
	if len(baks) != 1 {
		t.Fatalf("backups before the upgrade: %q", baks)
	}
	if bak, err := os.ReadFile(baks[0]); err != nil || len(bak) < len(raw)/2 {
		t.Fatalf("backup %d bytes, %v", len(bak), err)
	}
	want := map[string][]Reading{}
	for _, r := range v1Readings() {
		want[r.Counter] = append(want[r.Counter], r)
	}
	check := func(stage string) {
		for c, rs := range want {
			got := scanAll(t, s, c, time.Time{}, time.Time{})
			if !reflect.DeepEqual(got, rs) {
				t.Fatalf("%s: %s: %d readings differ from the %d written", stage, c, len(got), len(rs))
			}
			compareRollups(t, rollupsAll(t, s, c, time.Hour), recompute(t, s, c, time.Hour))
		}
		var ps []Pressure
		if err := s.ScanPressure("dp-asm", time.Time{}, time.Time{}, func(p Pressure) error { ps = append(ps, p); return nil }); err != nil || !reflect.DeepEqual(ps, v1Pressure()) {
			t.Fatalf("%s: pressure %d samples, %v", stage, len(ps), err)
		}
	}
	check("as upgraded")
	if res := compactOK(t, s); res.Readings != len(v1Readings())+len(v1Pressure()) {
		t.Fatalf("compaction moved %+v", res)
	}
	check("compacted")
	// New readings go on as usual, duplicates of old ones are known.
	if _, dup := appendOK(t, s, want["pc-hood"][:10]); dup != 10 {
		t.Fatalf("%d duplicates of upgraded readings, want 10", dup)
	}
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
	var ver uint64
	rawUpdate(t, filepath.Join(dir, FileName), func(tx *bolt.Tx) error {
		if tx.Bucket(bucketRollup1m) != nil {
			t.Error("minute rollups survived the upgrade")
		}
		ver, _ = binary.Uvarint(tx.Bucket(bucketMeta).Get(metaSchema))
		return nil
	})
	if ver != schemaVersion {
		t.Fatalf("schema %d after the upgrade", ver)
	}
}

// TestStreamReadingsMatchesScan: the streaming scan gives the same
// readings as ScanReadings, head and chunks, channels changing mid-way.
func TestStreamReadingsMatchesScan(t *testing.T) {
	s := quick(t)
	rs := series("pc-met", t0, 3000)
	for i := 1500; i < len(rs); i++ {
		rs[i].Sizes = []float64{0.5, 5}
		rs[i].Counts = rs[i].Counts[:2]
	}
	appendOK(t, s, rs[:2500])
	compactOK(t, s)
	appendOK(t, s, rs[2500:])
	var got []Reading
	err := s.StreamReadings("pc-met", time.Time{}, time.Time{}, func(r *Reading) error {
		c := *r
		c.Sizes = append([]float64(nil), r.Sizes...)
		c.Counts = append([]uint64(nil), r.Counts...)
		got = append(got, c)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if want := scanAll(t, s, "pc-met", time.Time{}, time.Time{}); !reflect.DeepEqual(got, want) || len(got) != len(rs) {
		t.Fatalf("streamed %d readings, scanned %d, differ", len(got), len(want))
	}
}

// TestBackgroundCompaction: the timer pass moves a counter's head once it
// holds enough readings, leaves a counter with few alone, and readings
// stay readable throughout.
func TestBackgroundCompaction(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true, CompactEvery: 20 * time.Millisecond})
	appendOK(t, s, series("pc-quiet", t0, 5))
	time.Sleep(100 * time.Millisecond) // some passes
	if n := headCount(t, s, "pc-quiet"); n != 5 {
		t.Fatalf("quiet log: %d head readings, want 5 left for a later pass", n)
	}
	appendOK(t, s, series("pc-busy", t0, compactMinLog))
	deadline := time.Now().Add(10 * time.Second)
	for headCount(t, s, "pc-busy")+headCount(t, s, "pc-quiet") != 0 {
		if time.Now().After(deadline) {
			t.Fatal("the background pass did not move a full head log in 10 s")
		}
		time.Sleep(10 * time.Millisecond)
	}
	if got := scanAll(t, s, "pc-busy", time.Time{}, time.Time{}); len(got) != compactMinLog {
		t.Fatalf("%d readings after the background pass", len(got))
	}
	if got := scanAll(t, s, "pc-quiet", time.Time{}, time.Time{}); len(got) != 5 {
		t.Fatalf("%d quiet readings after the background pass", len(got))
	}
}

// TestCompactionPassesOverDamage: a damaged chunk stops the compaction of
// its own counter only; the others move, nothing is lost.
func TestCompactionPassesOverDamage(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true, CompactEvery: -1})
	appendOK(t, s, series("pc-bad", t0, 100))
	compactOK(t, s)
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketChunks).Bucket([]byte("pc-bad"))
		k, _ := b.Cursor().First()
		return b.Put(append([]byte(nil), k...), []byte{codecChunk, 0xde, 0xad, 0xbe, 0xef, 0})
	})
	if err != nil {
		t.Fatal(err)
	}
	appendOK(t, s, series("pc-bad", t0.Add(200*time.Minute), 10))
	appendOK(t, s, series("pc-good", t0, 10))
	res := compactOK(t, s)
	if res.Counters != 1 || res.Readings != 10 || headCount(t, s, "pc-bad") != 10 || headCount(t, s, "pc-good") != 0 {
		t.Fatalf("compaction %+v; heads %d, %d", res, headCount(t, s, "pc-bad"), headCount(t, s, "pc-good"))
	}
	wantErr(t, s.ScanReadings("pc-bad", time.Time{}, time.Time{}, func(Reading) error { return nil }), ErrCorrupt)
}
