package store

import (
	"bufio"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

func TestReopenKeepsEverything(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "data") // Open creates it
	s := openTest(t, dir, Options{})
	ctx := context.Background()
	rs := series("pc-hood", t0, 200)
	appendOK(t, s, rs)
	if _, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp-hood-asm", Time: t0, Pa: 6}}); err != nil {
		t.Fatal(err)
	}
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "coating-hood", State: StateInOperation, By: "op", Time: t0}); err != nil {
		t.Fatal(err)
	}
	wantMinute := rollupsAll(t, s, "pc-hood", time.Minute)
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatalf("second Close: %v", err)
	}
	s = openTest(t, dir, Options{})
	got := scanAll(t, s, "pc-hood", time.Time{}, time.Time{})
	if len(got) != len(rs) {
		t.Fatalf("%d readings after reopen, want %d", len(got), len(rs))
	}
	for i := range rs {
		if !sameReading(got[i], rs[i]) {
			t.Fatalf("reading %d changed across reopen", i)
		}
	}
	compareRollups(t, rollupsAll(t, s, "pc-hood", time.Minute), wantMinute)
	if p, ok, _ := s.LatestPressure("dp-hood-asm"); !ok || p.Pa != 6 {
		t.Fatal("pressure lost across reopen")
	}
	if st, _ := s.OperatingStates(); st["coating-hood"].State != StateInOperation {
		t.Fatal("operating state lost across reopen")
	}
	if s.Path() != filepath.Join(dir, FileName) {
		t.Fatalf("Path %s", s.Path())
	}
	if info, err := os.Stat(dir); err != nil || info.Mode().Perm() != 0o700 {
		t.Fatalf("data directory mode %v %v", info.Mode(), err)
	}
}

func TestSecondOpenIsLocked(t *testing.T) {
	dir := t.TempDir()
	first := openTest(t, dir, Options{})
	for _, timeout := range []time.Duration{50 * time.Millisecond, 0 /* default: 1 s */} {
		start := time.Now()
		s, err := Open(dir, Options{LockTimeout: timeout})
		elapsed := time.Since(start)
		if err == nil {
			_ = s.Close()
			t.Fatal("second Open on the same directory succeeded")
		}
		wantErr(t, err, ErrLocked)
		if !strings.Contains(err.Error(), first.Path()) {
			t.Errorf("message %q does not name the file", err)
		}
		// Bounded wait, not a performance claim: a refusal must not hang.
		if elapsed > 5*time.Second {
			t.Fatalf("refusal took %s", elapsed)
		}
	}
	_, err := Verify(first.Path())
	wantErr(t, err, ErrLocked)
}

func TestClosedStore(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-asm-1", t0, 1))
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	calls := map[string]func() error{
		"AppendReadings": func() error { _, _, err := s.AppendReadings(ctx, series("pc-asm-1", t0, 1)); return err },
		"AppendPressure": func() error {
			_, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp", Time: t0, Pa: 1}})
			return err
		},
		"ScanReadings": func() error {
			return s.ScanReadings("pc-asm-1", time.Time{}, time.Time{}, func(Reading) error { return nil })
		},
		"ScanPressure": func() error {
			return s.ScanPressure("dp", time.Time{}, time.Time{}, func(Pressure) error { return nil })
		},
		"ScanRollups": func() error {
			return s.ScanRollups("pc-asm-1", time.Hour, time.Time{}, time.Time{}, func(Rollup) error { return nil })
		},
		"LatestReading": func() error { _, _, err := s.LatestReading("pc-asm-1"); return err },
		"LatestPressure": func() error {
			_, _, err := s.LatestPressure("dp")
			return err
		},
		"SetOperatingState": func() error {
			return s.SetOperatingState(ctx, OperatingState{Zone: "z", State: StateAtRest})
		},
		"OperatingStates":       func() error { _, err := s.OperatingStates(); return err },
		"OperatingStateHistory": func() error { return s.OperatingStateHistory("z", func(OperatingState) error { return nil }) },
		"Sweep":                 func() error { _, err := s.Sweep(ctx, t0); return err },
		"Backup":                func() error { _, err := s.Backup(new(strings.Builder)); return err },
		"BackupFile":            func() error { _, err := s.BackupFile(filepath.Join(t.TempDir(), FileName)); return err },
		"RecordAlarms": func() error {
			_, err := s.RecordAlarms(ctx, []AlarmRecord{alarmRec("a-1", t0, "active")}, nil)
			return err
		},
		"OpenAlarms": func() error { return s.OpenAlarms(func(string, []byte) error { return nil }) },
		"ScanAlarms": func() error {
			return s.ScanAlarms(time.Time{}, func(string, time.Time, []byte, bool) error { return nil })
		},
		"ScanAlarmJournal": func() error {
			return s.ScanAlarmJournal(time.Time{}, time.Time{}, func(uint64, time.Time, string, []byte) error { return nil })
		},
		"OutboxDue":   func() error { _, err := s.OutboxDue("webhook", t0, 1); return err },
		"OutboxLen":   func() error { _, err := s.OutboxLen("webhook"); return err },
		"OutboxDone":  func() error { return s.OutboxDone(ctx, 1) },
		"OutboxRetry": func() error { return s.OutboxRetry(ctx, 1, 1, t0, "x") },
		"AppendAudit": func() error { _, _, err := s.AppendAudit(ctx, configLoadEntry()); return err },
		"ScanAudit":   func() error { return s.ScanAudit(0, 0, func(AuditEntry) error { return nil }) },
		"AuditHead":   func() error { _, _, err := s.AuditHead(); return err },
	}
	for name, call := range calls {
		if err := call(); !errors.Is(err, ErrClosed) {
			t.Errorf("%s after Close: %v, want ErrClosed", name, err)
		}
	}
}

func TestCloseWaitsForCommits(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{}) // real fsync: Close must wait for it
	var (
		mu    sync.Mutex
		acked []Reading
		wg    sync.WaitGroup
		start = make(chan struct{})
	)
	for g := 0; g < 8; g++ {
		wg.Add(1)
		go func(g int) {
			defer wg.Done()
			<-start
			for i := 0; i < 1000; i++ {
				rs := series(fmt.Sprintf("pc-%d", g), t0.Add(time.Duration(i)*time.Hour), 5)
				_, _, err := s.AppendReadings(context.Background(), rs)
				if errors.Is(err, ErrClosed) {
					return
				}
				if err != nil {
					t.Errorf("append: %v", err)
					return
				}
				mu.Lock()
				acked = append(acked, rs...)
				mu.Unlock()
			}
		}(g)
	}
	close(start)
	time.Sleep(50 * time.Millisecond)
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	wg.Wait()
	if len(acked) == 0 {
		t.Fatal("no append finished before Close; the test proves nothing")
	}
	s = openTest(t, dir, Options{})
	for _, r := range acked {
		got := scanAll(t, s, r.Counter, r.Time, r.Time.Add(1))
		if len(got) != 1 {
			t.Fatalf("acknowledged reading %s %s missing after Close", r.Counter, r.Time)
		}
	}
}

// TestKillKeepsAcknowledged runs a writer in a child process, kills it
// with SIGKILL mid-stream, and checks that every batch it acknowledged is
// in the file.
func TestKillKeepsAcknowledged(t *testing.T) {
	if dir := os.Getenv("CLEANMON_STORE_CHILD_DIR"); dir != "" {
		killChild(dir)
		return
	}
	dir := t.TempDir()
	cmd := exec.Command(os.Args[0], "-test.run=^TestKillKeepsAcknowledged$", "-test.count=1")
	cmd.Env = append(os.Environ(), "CLEANMON_STORE_CHILD_DIR="+dir)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	acked := map[int]bool{}
	lines := bufio.NewScanner(out)
	deadline := time.AfterFunc(30*time.Second, func() { _ = cmd.Process.Kill() })
	for len(acked) < 30 && lines.Scan() {
		if n, ok := strings.CutPrefix(lines.Text(), "ack "); ok {
			i, _ := strconv.Atoi(n)
			acked[i] = true
		}
	}
	deadline.Stop()
	_ = cmd.Process.Kill()
	_ = cmd.Wait()
	if len(acked) < 30 {
		t.Fatalf("child acknowledged only %d batches", len(acked))
	}
	s := openTest(t, dir, Options{})
	for i := range acked {
		if got := scanAll(t, s, "pc-asm-1", killBatchTime(i), killBatchTime(i+1)); len(got) != 10 {
			t.Fatalf("batch %d acknowledged but %d of 10 readings stored", i, len(got))
		}
	}
	_ = s.Close()
	if problems, err := Verify(dir); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after kill -9: %v %v", problems, err)
	}
}

func killBatchTime(i int) time.Time { return t0.Add(time.Duration(i) * 10 * time.Minute) }

func killChild(dir string) {
	s, err := Open(dir, Options{})
	if err != nil {
		fmt.Println("open:", err)
		os.Exit(1)
	}
	for i := 0; i < 100000; i++ {
		if _, _, err := s.AppendReadings(context.Background(), series("pc-asm-1", killBatchTime(i), 10)); err != nil {
			fmt.Println("append:", err)
			os.Exit(1)
		}
		fmt.Printf("ack %d\n", i)
	}
	os.Exit(0)
}

// damage writes a store with some data, closes it, and returns its file.
func damagedFixture(t *testing.T) (dir, path string, dataSize int64) {
	t.Helper()
	dir = t.TempDir()
	// The head keeps one value per reading, so most pages are in use
	// and a damaged page is one the store reads.
	s := openTest(t, dir, Options{NoSync: true, keepHead: true})
	appendOK(t, s, series("pc-asm-1", t0, 3000))
	path = s.Path()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	_ = db.View(func(tx *bolt.Tx) error { dataSize = tx.Size(); return nil })
	_ = db.Close()
	return dir, path, dataSize
}

func TestOpenDamagedFile(t *testing.T) {
	cases := []struct {
		name   string
		damage func(t *testing.T, path string, size int64)
		want   error
	}{
		{"truncated to half its pages", func(t *testing.T, path string, size int64) {
			if err := os.Truncate(path, size/2); err != nil {
				t.Fatal(err)
			}
		}, ErrCorrupt},
		{"truncated inside the meta pages", func(t *testing.T, path string, size int64) {
			if err := os.Truncate(path, 100); err != nil {
				t.Fatal(err)
			}
		}, ErrCorrupt},
		{"emptied", func(t *testing.T, path string, size int64) {
			if err := os.Truncate(path, 0); err != nil {
				t.Fatal(err)
			}
		}, ErrCorrupt},
		{"replaced by random bytes", func(t *testing.T, path string, size int64) {
			b := make([]byte, 64<<10)
			r := rand.New(rand.NewPCG(3, 4))
			for i := range b {
				b[i] = byte(r.Uint32())
			}
			if err := os.WriteFile(path, b, 0o600); err != nil {
				t.Fatal(err)
			}
		}, ErrCorrupt},
		{"both meta pages damaged", func(t *testing.T, path string, size int64) {
			f, err := os.OpenFile(path, os.O_RDWR, 0)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			page := int64(os.Getpagesize())
			for _, off := range []int64{32, page + 32} { // inside each meta
				if _, err := f.WriteAt([]byte{0xff, 0x00, 0xff, 0x00}, off); err != nil {
					t.Fatal(err)
				}
			}
		}, ErrCorrupt},
		{"another program's bbolt file", func(t *testing.T, path string, size int64) {
			_ = os.Remove(path)
			db, err := bolt.Open(path, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			_ = db.Update(func(tx *bolt.Tx) error { _, err := tx.CreateBucket([]byte("sessions")); return err })
			_ = db.Close()
		}, ErrCorrupt},
		{"newer schema", func(t *testing.T, path string, size int64) {
			db, err := bolt.Open(path, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			_ = db.Update(func(tx *bolt.Tx) error {
				return tx.Bucket(bucketMeta).Put(metaSchema, binary.AppendUvarint(nil, schemaVersion+1))
			})
			_ = db.Close()
		}, ErrSchema},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir, path, size := damagedFixture(t)
			c.damage(t, path, size)
			s, err := Open(dir, Options{LockTimeout: 100 * time.Millisecond})
			if err == nil {
				_ = s.Close()
				t.Fatal("Open succeeded on a damaged file")
			}
			wantErr(t, err, c.want)
			if c.want == ErrCorrupt && (!strings.Contains(err.Error(), "cleanmon verify") || !strings.Contains(err.Error(), "backup")) {
				t.Fatalf("message %q does not point at verify and the backup", err)
			}
			if errors.Is(err, ErrLocked) {
				t.Fatal("a failed Open left the file locked")
			}
			// Nothing was left locked or half-open: a fresh directory opens.
			openTest(t, t.TempDir(), Options{NoSync: true})
		})
	}
}

// TestGarbagePages overwrites random data pages (meta pages intact), the
// damage a bad disk block does. Whatever the pages held, the store must
// answer with ErrCorrupt or carry on, never crash or leave a lock, and
// Verify must find the damage. Seed 32 hits the freelist page.
func TestGarbagePages(t *testing.T) {
	for _, seed := range []uint64{0, 1, 2, 3, 4, 5, 6, 7, 9, 13, 32} {
		t.Run(fmt.Sprint("seed ", seed), func(t *testing.T) {
			dir, path, size := damagedFixture(t)
			f, err := os.OpenFile(path, os.O_RDWR, 0)
			if err != nil {
				t.Fatal(err)
			}
			r := rand.New(rand.NewPCG(seed, 9))
			page := int64(os.Getpagesize())
			for k := 0; k < 3; k++ {
				b := make([]byte, page)
				for i := range b {
					b[i] = byte(r.Uint32())
				}
				if _, err := f.WriteAt(b, (2+r.Int64N(size/page-2))*page); err != nil {
					t.Fatal(err)
				}
			}
			_ = f.Close()
			s, err := Open(dir, Options{NoSync: true, LockTimeout: 100 * time.Millisecond})
			if err != nil && !errors.Is(err, ErrCorrupt) {
				t.Fatalf("Open: %v, want nil or ErrCorrupt", err)
			}
			if err == nil {
				scanErr := s.ScanReadings("pc-asm-1", time.Time{}, time.Time{}, func(Reading) error { return nil })
				_, _, appendErr := s.AppendReadings(context.Background(), series("pc-asm-1", t0.Add(-time.Hour), 10))
				for _, e := range []error{scanErr, appendErr} {
					if e != nil && !errors.Is(e, ErrCorrupt) {
						t.Fatalf("on a damaged file: %v, want nil or ErrCorrupt", e)
					}
				}
				if err := s.Close(); err != nil && !errors.Is(err, ErrCorrupt) {
					t.Fatalf("Close: %v", err)
				}
			}
			problems, err := Verify(path)
			if err != nil && !errors.Is(err, ErrCorrupt) {
				t.Fatalf("Verify: %v", err)
			}
			if len(problems) == 0 {
				t.Fatal("Verify found nothing wrong with garbage pages")
			}
		})
	}
}
