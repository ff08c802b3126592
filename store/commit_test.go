package store

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

var commitModes = []struct {
	name string
	mode commitMode
}{{"committer", commitQueue}, {"db.Batch", commitBatch}}

func TestConcurrentAppends(t *testing.T) {
	for _, m := range commitModes {
		t.Run(m.name, func(t *testing.T) {
			s := openTest(t, t.TempDir(), Options{commit: m.mode}) // real fsync
			const goroutines, calls, perCall, counters = 16, 25, 10, 4
			var acc, dup atomic.Int64
			var wg sync.WaitGroup
			for g := 0; g < goroutines; g++ {
				wg.Add(1)
				go func() {
					defer wg.Done()
					// Four goroutines per counter write the same times:
					// every record arrives four times, concurrently.
					counter := fmt.Sprintf("pc-%d", g%counters)
					for i := 0; i < calls; i++ {
						a, d, err := s.AppendReadings(context.Background(), series(counter, t0.Add(time.Duration(i*perCall)*time.Minute), perCall))
						if err != nil {
							t.Error(err)
							return
						}
						acc.Add(int64(a))
						dup.Add(int64(d))
					}
				}()
			}
			wg.Wait()
			unique := counters * calls * perCall
			if acc.Load() != int64(unique) || dup.Load() != int64(3*unique) {
				t.Fatalf("accepted %d duplicates %d, want %d and %d", acc.Load(), dup.Load(), unique, 3*unique)
			}
			for c := 0; c < counters; c++ {
				counter := fmt.Sprintf("pc-%d", c)
				got := scanAll(t, s, counter, time.Time{}, time.Time{})
				if len(got) != calls*perCall {
					t.Fatalf("%s: %d readings, want %d exactly once each", counter, len(got), calls*perCall)
				}
				for i, r := range got {
					if !r.Time.Equal(t0.Add(time.Duration(i) * time.Minute)) {
						t.Fatalf("%s: reading %d at %s", counter, i, r.Time)
					}
				}
				compareRollups(t, rollupsAll(t, s, counter, time.Hour), recompute(t, s, counter, time.Hour))
			}
			t.Logf("%d calls in %d commit transactions", goroutines*calls, s.commits.Load())
		})
	}
}

// holdCommitter makes the committer wait, after taking its first request,
// until want more are queued, so that they are certain to form one group.
func holdCommitter(s *Store, want int) (release func()) {
	gate := make(chan struct{})
	var once sync.Once
	s.beforeCommit = func() {
		once.Do(func() {
			for i := 0; i < 5000 && len(s.reqs) < want; i++ {
				time.Sleep(time.Millisecond)
			}
			<-gate
		})
	}
	return func() { close(gate) }
}

func TestGroupCommitSharesOneTransaction(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{})
	const callers = 20
	release := holdCommitter(s, callers-1)
	var wg sync.WaitGroup
	for g := 0; g < callers; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if _, _, err := s.AppendReadings(context.Background(), series(fmt.Sprintf("pc-%d", g), t0, 5)); err != nil {
				t.Error(err)
			}
		}()
	}
	time.Sleep(10 * time.Millisecond)
	release()
	wg.Wait()
	if n := s.commits.Load(); n != 1 {
		t.Fatalf("%d callers used %d transactions, want 1", callers, n)
	}
}

func TestGroupMemberFailureIsolated(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true})
	const callers = 6
	release := holdCommitter(s, callers-1)
	boom := errors.New("member fails")
	errs := make([]error, callers)
	var wg sync.WaitGroup
	for g := 0; g < callers; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			errs[g] = s.submit(context.Background(), 1, func(tx *bolt.Tx) error {
				b, err := tx.Bucket(bucketMeta).CreateBucketIfNotExists([]byte("test"))
				if err != nil {
					return err
				}
				if err := b.Put([]byte{byte(g)}, []byte("x")); err != nil {
					return err
				}
				if g == 3 {
					return boom // after writing: the write must vanish
				}
				return nil
			})
		}()
	}
	time.Sleep(10 * time.Millisecond)
	release()
	wg.Wait()
	_ = s.db.View(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketMeta).Bucket([]byte("test"))
		for g := 0; g < callers; g++ {
			stored := b != nil && b.Get([]byte{byte(g)}) != nil
			switch {
			case g == 3 && (!errors.Is(errs[g], boom) || stored):
				t.Errorf("failing member: err %v, stored %v", errs[g], stored)
			case g != 3 && (errs[g] != nil || !stored):
				t.Errorf("member %d: err %v, stored %v", g, errs[g], stored)
			}
		}
		return nil
	})
}

func TestCanceledWhileQueued(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true})
	release := holdCommitter(s, 1)
	first := make(chan error, 1)
	go func() {
		_, _, err := s.AppendReadings(context.Background(), series("pc-a", t0, 1))
		first <- err
	}()
	ctx, cancel := context.WithCancel(context.Background())
	second := make(chan error, 1)
	go func() {
		_, _, err := s.AppendReadings(ctx, series("pc-b", t0, 1))
		second <- err
	}()
	for i := 0; i < 5000 && len(s.reqs) < 1; i++ {
		time.Sleep(time.Millisecond)
	}
	cancel()
	if err := <-second; !errors.Is(err, context.Canceled) {
		t.Fatalf("queued call canceled: %v", err)
	}
	release()
	if err := <-first; err != nil {
		t.Fatal(err)
	}
	if _, ok, _ := s.LatestReading("pc-b"); ok {
		t.Fatal("a call withdrawn from the queue was stored")
	}
	if _, ok, _ := s.LatestReading("pc-a"); !ok {
		t.Fatal("the first call was lost")
	}
}
