package store

import (
	"context"

	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// The site shape the store is sized for: 200 counters, one reading a
// minute each with four channels, posted in time order across all
// counters in batches of 1 000 by 4 writers, fsync on.
//
//	go test ./store -run '^$' -bench 'SiteShape|Year|VerifyRate' -benchtime 1x
const (
	shapeCounters = 200
	shapeWriters  = 4
	shapeBatch    = 1000
)

// shapeReadings is minutes×counters readings in time order. Counts are
// noisy around a level that falls with size as the ISO 14644-1 formula
// does (exponent 2.08, ISO 14644-1:2015 clause 3.3 / Table 1 formula),
// Poisson-like spread (√n, common practice, no source): the kind of
// numbers a quiet ISO 7 room gives, and the kind that compress worst.
func shapeReadings(minutes int) []Reading {
	rng := rand.New(rand.NewPCG(7, 11))
	start := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	base := make([]float64, shapeCounters)
	for c := range base {
		base[c] = 200 + rng.Float64()*3000 // ≥0.3 µm counts per 28.3 L
	}
	out := make([]Reading, 0, minutes*shapeCounters)
	for m := range minutes {
		for c := range shapeCounters {
			counts := make([]uint64, len(isoSizes))
			for j, size := range isoSizes {
				mean := base[c] * math.Pow(0.3/size, 2.08)
				v := mean + rng.NormFloat64()*math.Sqrt(mean)
				counts[j] = uint64(max(0, math.Round(v)))
			}
			for j := len(counts) - 2; j >= 0; j-- { // cumulative: never below the larger size
				counts[j] = max(counts[j], counts[j+1])
			}
			out = append(out, Reading{
				Counter: fmt.Sprintf("pc-%03d", c), Time: start.Add(time.Duration(m) * time.Minute),
				VolumeL: oneMinuteL, FlowLPM: 28.3, SampleSeconds: 60, Status: "ok",
				Sizes: isoSizes, Counts: counts,
			})
		}
	}
	return out
}

// ingestShape posts rs in batches of shapeBatch, the batches dealt to
// shapeWriters writers in turn, and returns the durable readings/s.
func ingestShape(tb testing.TB, s *Store, rs []Reading) float64 {
	var wg sync.WaitGroup
	batches := make(chan []Reading)
	begin := time.Now()
	for range shapeWriters {
		wg.Go(func() {
			for b := range batches {
				if _, _, err := s.AppendReadings(context.Background(), b); err != nil {
					tb.Error(err)
				}
			}
		})
	}
	for i := 0; i < len(rs); i += shapeBatch {
		batches <- rs[i:min(i+shapeBatch, len(rs))]
	}
	close(batches)
	wg.Wait()
	return float64(len(rs)) / time.Since(begin).Seconds()
}

func fileSize(tb testing.TB, dir string) int64 {
	info, err := os.Stat(filepath.Join(dir, FileName))
	if err != nil {
		tb.Fatal(err)
	}
	return info.Size()
}

// BenchmarkSiteShape ingests two days of the site shape (576 000
// readings) durably, stops the store cleanly, and reports the durable
// ingest rate, the file's bytes per reading, and the rate at which Verify
// checks it.
func BenchmarkSiteShape(b *testing.B) {
	rs := shapeReadings(2 * 24 * 60)
	for b.Loop() {
		dir := b.TempDir()
		s, err := Open(dir, Options{})
		if err != nil {
			b.Fatal(err)
		}
		rate := ingestShape(b, s, rs)
		// What the durable writes cost the disk: the dirty pages bbolt
		// allocated and wrote in every transaction so far (ingest and
		// background compaction), per reading and per batch of the shape.
		st := s.db.Stats().TxStats
		b.ReportMetric(float64(st.GetPageAlloc())/float64(len(rs)), "written-bytes/reading")
		b.ReportMetric(float64(st.GetPageCount())/float64(len(rs)/shapeBatch), "page-allocs/batch")
		if err := s.Close(); err != nil {
			b.Fatal(err)
		}
		size := fileSize(b, dir)
		inUse := reportBuckets(b, dir, len(rs))
		begin := time.Now()
		problems, err := Verify(dir)
		if err != nil || len(problems) != 0 {
			b.Fatalf("Verify: %q %v", problems, err)
		}
		b.ReportMetric(float64(len(rs))/time.Since(begin).Seconds(), "verified-readings/s")
		b.ReportMetric(rate, "durable-readings/s")
		b.ReportMetric(float64(size)/float64(len(rs)), "bytes/reading")
		b.ReportMetric(float64(inUse)/float64(len(rs)), "inuse-bytes/reading")
	}
}

// reportBuckets logs the bytes each top-level bucket's pages hold per
// reading, and returns the bytes in use: the rest of the file is free
// pages (the head's high-water mark) and bbolt's growth allowance.
func reportBuckets(tb testing.TB, dir string, readings int) int64 {
	db, err := bolt.Open(filepath.Join(dir, FileName), 0o600, &bolt.Options{ReadOnly: true})
	if err != nil {
		tb.Fatal(err)
	}
	defer db.Close()
	var total int64
	_ = db.View(func(tx *bolt.Tx) error {
		return tx.ForEach(func(name []byte, b *bolt.Bucket) error {
			st := b.Stats()
			n := int64(st.BranchAlloc + st.LeafAlloc)
			total += n
			tb.Logf("%-20s %8.2f bytes/reading (%d bytes in pages)", name, float64(n)/float64(readings), n)
			return nil
		})
	})
	return total
}

// BenchmarkYearBytes reports the bytes per reading of the year store (one
// location, 525 600 readings) after its clean stop.
func BenchmarkYearBytes(b *testing.B) {
	s := openYear(b)
	_ = s.Close()
	for b.Loop() {
		b.ReportMetric(float64(fileSize(b, yearStore.dir))/yearReadings, "bytes/reading")
		b.ReportMetric(float64(reportBuckets(b, yearStore.dir, yearReadings))/yearReadings, "inuse-bytes/reading")
	}
}

// BenchmarkVerifyRate verifies the year store: one counter, 525 600
// readings, all in chunks.
func BenchmarkVerifyRate(b *testing.B) {
	s := openYear(b)
	_ = s.Close()
	for b.Loop() {
		problems, err := Verify(yearStore.dir)
		if err != nil || len(problems) != 0 {
			b.Fatalf("Verify: %q %v", problems, err)
		}
	}
	b.ReportMetric(float64(yearReadings)*float64(b.N)/b.Elapsed().Seconds(), "readings/s")
}
