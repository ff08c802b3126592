package store

import (
	"context"
	"fmt"
	"os"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// Benchmarks run on a real file with fsync on, unless said otherwise.
//
//	go test -run '^$' -bench . -benchtime 3s ./store/

func BenchmarkAppendReadings(b *testing.B) {
	for _, batch := range []int{1000, 1} {
		for _, m := range commitModes {
			b.Run(fmt.Sprintf("batch=%d/%s", batch, m.name), func(b *testing.B) {
				s := openTest(b, b.TempDir(), Options{commit: m.mode})
				ctx := context.Background()
				i := 0
				for b.Loop() {
					rs := series("pc-asm-1", t0.Add(time.Duration(i*batch)*time.Minute), batch)
					if _, _, err := s.AppendReadings(ctx, rs); err != nil {
						b.Fatal(err)
					}
					i++
				}
				b.ReportMetric(float64(i*batch)/b.Elapsed().Seconds(), "readings/s")
			})
		}
	}
}

// BenchmarkAppendReadingsParallel shows group commit: 16 concurrent
// callers, each its own counter; readings/commit above the batch size
// means callers shared transactions.
func BenchmarkAppendReadingsParallel(b *testing.B) {
	for _, batch := range []int{100, 1} {
		for _, m := range commitModes {
			b.Run(fmt.Sprintf("batch=%d/%s", batch, m.name), func(b *testing.B) {
				s := openTest(b, b.TempDir(), Options{commit: m.mode})
				var ids, total atomic.Int64
				b.SetParallelism(8) // 8 × GOMAXPROCS goroutines
				b.ResetTimer()
				b.RunParallel(func(pb *testing.PB) {
					counter := fmt.Sprintf("pc-%d", ids.Add(1))
					for i := 0; pb.Next(); i++ {
						rs := series(counter, t0.Add(time.Duration(i*batch)*time.Minute), batch)
						if _, _, err := s.AppendReadings(context.Background(), rs); err != nil {
							b.Error(err)
							return
						}
						total.Add(int64(batch))
					}
				})
				b.ReportMetric(float64(total.Load())/b.Elapsed().Seconds(), "readings/s")
				b.ReportMetric(float64(total.Load())/float64(max(1, s.commits.Load())), "readings/commit")
			})
		}
	}
}

// yearStore is one counter's year of one-minute readings (525 600), built
// once for the scan benchmarks without fsync, then reopened normally.
var yearStore struct {
	once sync.Once
	dir  string
	err  error
}

const yearReadings = 365 * 24 * 60

func openYear(b *testing.B) *Store {
	b.Helper()
	yearStore.once.Do(func() {
		yearStore.dir, yearStore.err = os.MkdirTemp("", "cleanmon-store-bench-")
		if yearStore.err != nil {
			return
		}
		s, err := Open(yearStore.dir, Options{NoSync: true})
		if err != nil {
			yearStore.err = err
			return
		}
		defer s.Close()
		start := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
		for i := 0; i < yearReadings && yearStore.err == nil; i += 10000 {
			n := min(10000, yearReadings-i)
			_, _, yearStore.err = s.AppendReadings(context.Background(), series("pc-asm-1", start.Add(time.Duration(i)*time.Minute), n))
		}
	})
	if yearStore.err != nil {
		b.Fatal(yearStore.err)
	}
	return openTest(b, yearStore.dir, Options{})
}

func BenchmarkScanReadingsYear(b *testing.B) {
	s := openYear(b)
	for b.Loop() {
		n := 0
		if err := s.ScanReadings("pc-asm-1", time.Time{}, time.Time{}, func(Reading) error { n++; return nil }); err != nil {
			b.Fatal(err)
		}
		if n != yearReadings {
			b.Fatalf("scanned %d readings", n)
		}
	}
	b.ReportMetric(float64(yearReadings)*float64(b.N)/b.Elapsed().Seconds(), "readings/s")
}

// BenchmarkStreamReadingsYear is the scan the API's row encoders use.
func BenchmarkStreamReadingsYear(b *testing.B) {
	s := openYear(b)
	for b.Loop() {
		n := 0
		if err := s.StreamReadings("pc-asm-1", time.Time{}, time.Time{}, func(*Reading) error { n++; return nil }); err != nil {
			b.Fatal(err)
		}
		if n != yearReadings {
			b.Fatalf("streamed %d readings", n)
		}
	}
	b.ReportMetric(float64(yearReadings)*float64(b.N)/b.Elapsed().Seconds(), "readings/s")
}

func BenchmarkScanRollupsHourlyYear(b *testing.B) {
	s := openYear(b)
	for b.Loop() {
		n := 0
		if err := s.ScanRollups("pc-asm-1", time.Hour, time.Time{}, time.Time{}, func(Rollup) error { n++; return nil }); err != nil {
			b.Fatal(err)
		}
		if n != 365*24 {
			b.Fatalf("scanned %d rollups", n)
		}
	}
}

func TestMain(m *testing.M) {
	code := m.Run()
	if yearStore.dir != "" {
		_ = os.RemoveAll(yearStore.dir)
	}
	os.Exit(code)
}

// BenchmarkRecordAlarms journals transitions with two notifiers each, one
// caller (records per call) and 16 concurrent callers of one record each.
func BenchmarkRecordAlarms(b *testing.B) {
	notifiers := notifierNames[:2]
	for _, per := range []int{1, 10} {
		b.Run(fmt.Sprintf("records=%d", per), func(b *testing.B) {
			s := openTest(b, b.TempDir(), Options{})
			ctx := context.Background()
			i := 0
			for b.Loop() {
				recs := make([]AlarmRecord, per)
				for j := range recs {
					recs[j] = alarmRec(fmt.Sprint("a-", j%50), t0.Add(time.Duration(i*per+j)*time.Second), "active")
				}
				if _, err := s.RecordAlarms(ctx, recs, notifiers); err != nil {
					b.Fatal(err)
				}
				i++
			}
			b.ReportMetric(float64(i*per)/b.Elapsed().Seconds(), "records/s")
		})
	}
	b.Run("records=1/parallel", func(b *testing.B) {
		s := openTest(b, b.TempDir(), Options{})
		var ids, total atomic.Int64
		b.SetParallelism(8)
		b.ResetTimer()
		b.RunParallel(func(pb *testing.PB) {
			id := fmt.Sprint("a-", ids.Add(1))
			for i := 0; pb.Next(); i++ {
				if _, err := s.RecordAlarms(context.Background(), []AlarmRecord{alarmRec(id, t0.Add(time.Duration(i)*time.Second), "active")}, notifiers); err != nil {
					b.Error(err)
					return
				}
				total.Add(1)
			}
		})
		b.ReportMetric(float64(total.Load())/b.Elapsed().Seconds(), "records/s")
		b.ReportMetric(float64(total.Load())/float64(max(1, s.commits.Load())), "records/commit")
	})
}
