package store

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// snapshot is everything a store holds, for comparing two stores.
type snapshot struct {
	readings map[string][]Reading
	rollups  map[string][]Rollup
	pressure []Pressure
	states   map[string]OperatingState
}

func takeSnapshot(t *testing.T, s *Store, counters []string) snapshot {
	t.Helper()
	snap := snapshot{readings: map[string][]Reading{}, rollups: map[string][]Rollup{}}
	for _, c := range counters {
		snap.readings[c] = scanAll(t, s, c, time.Time{}, time.Time{})
		snap.rollups[c+"/1m"] = rollupsAll(t, s, c, time.Minute)
		snap.rollups[c+"/1h"] = rollupsAll(t, s, c, time.Hour)
	}
	_ = s.ScanPressure("dp-asm-gown", time.Time{}, time.Time{}, func(p Pressure) error {
		snap.pressure = append(snap.pressure, p)
		return nil
	})
	var err error
	if snap.states, err = s.OperatingStates(); err != nil {
		t.Fatal(err)
	}
	return snap
}

func TestBackupWhileWriting(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true})
	ctx := context.Background()
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: StateAtRest, By: "op", Time: t0}); err != nil {
		t.Fatal(err)
	}
	if _, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp-asm-gown", Time: t0, Pa: 10.5}}); err != nil {
		t.Fatal(err)
	}
	counters := []string{"pc-asm-1", "pc-asm-2", "pc-asm-3"}
	const perCall = 10
	var (
		stop  atomic.Bool
		wg    sync.WaitGroup
		calls atomic.Int64
	)
	for _, c := range counters {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := 0; !stop.Load() && i < 5000; i++ {
				if _, _, err := s.AppendReadings(ctx, series(c, t0.Add(time.Duration(i*perCall)*time.Minute), perCall)); err != nil {
					t.Error(err)
					return
				}
				calls.Add(1)
			}
		}()
	}
	for calls.Load() < 30 {
		time.Sleep(time.Millisecond)
	}
	midDir := t.TempDir()
	n, err := s.BackupFile(filepath.Join(midDir, FileName))
	if err != nil {
		t.Fatal(err)
	}
	stop.Store(true)
	wg.Wait()
	if info, _ := os.Stat(filepath.Join(midDir, FileName)); info.Size() != n {
		t.Fatalf("BackupFile reported %d bytes, file has %d", n, info.Size())
	}
	// The mid-stream copy is a consistent store: it verifies clean, and
	// each counter holds whole calls, oldest first, with no gap.
	if problems, err := Verify(midDir); err != nil || len(problems) != 0 {
		t.Fatalf("Verify(backup taken while writing) = %q, %v", problems, err)
	}
	mid := openTest(t, midDir, Options{NoSync: true})
	for _, c := range counters {
		got := scanAll(t, mid, c, time.Time{}, time.Time{})
		if len(got)%perCall != 0 {
			t.Fatalf("%s: %d readings in the backup, not whole calls of %d", c, len(got), perCall)
		}
		for i, r := range got {
			if !r.Time.Equal(t0.Add(time.Duration(i) * time.Minute)) {
				t.Fatalf("%s: gap before reading %d", c, i)
			}
		}
	}

	// Once writers stop, a backup holds exactly what the store holds.
	var buf bytes.Buffer
	if _, err := s.Backup(&buf); err != nil {
		t.Fatal(err)
	}
	finalDir := t.TempDir()
	if err := os.WriteFile(filepath.Join(finalDir, FileName), buf.Bytes(), 0o600); err != nil {
		t.Fatal(err)
	}
	final := openTest(t, finalDir, Options{NoSync: true})
	want, got := takeSnapshot(t, s, counters), takeSnapshot(t, final, counters)
	if !reflect.DeepEqual(want, got) {
		t.Fatal("backup differs from the store")
	}
	if len(want.readings["pc-asm-1"]) == 0 || len(want.pressure) != 1 || len(want.states) != 1 {
		t.Fatalf("snapshot is empty: %d readings", len(want.readings["pc-asm-1"]))
	}
}

type failingWriter struct{ after int }

func (w *failingWriter) Write(p []byte) (int, error) {
	if w.after -= len(p); w.after < 0 {
		return 0, fmt.Errorf("disk unplugged")
	}
	return len(p), nil
}

func TestBackupWriterFails(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-asm-1", t0, 100))
	if _, err := s.Backup(&failingWriter{after: 8192}); err == nil {
		t.Fatal("a failing writer gave no error")
	}
	dst := filepath.Join(t.TempDir(), "sub-missing", FileName)
	if _, err := s.BackupFile(dst); err == nil {
		t.Fatal("BackupFile into a missing directory gave no error")
	}
	appendOK(t, s, series("pc-asm-1", t0.Add(time.Hour), 1)) // still writable
}
