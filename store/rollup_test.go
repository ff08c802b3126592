package store

import (
	"context"
	"errors"
	"math/rand/v2"
	"reflect"
	"sort"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// recompute builds the rollups of counter at step from its raw readings,
// the way a reader of the standard would by hand: group by bucket, count,
// average and take the maximum of the cumulative concentration per size.
func recompute(t *testing.T, s *Store, counter string, step time.Duration) []Rollup {
	t.Helper()
	type agg struct {
		samples int
		sum     map[float64]float64
		max     map[float64]float64
		n       map[float64]int
	}
	byStart := map[time.Time]*agg{}
	for _, r := range scanAll(t, s, counter, time.Time{}, time.Time{}) {
		start := r.Time.Truncate(step)
		a := byStart[start]
		if a == nil {
			a = &agg{sum: map[float64]float64{}, max: map[float64]float64{}, n: map[float64]int{}}
			byStart[start] = a
		}
		a.samples++
		for i, v := range r.PerM3() {
			size := r.Sizes[i]
			a.sum[size] += v
			a.n[size]++
			if v > a.max[size] {
				a.max[size] = v
			}
		}
	}
	var out []Rollup
	for start, a := range byStart {
		r := Rollup{Start: start, Step: step, Samples: a.samples}
		for size := range a.n {
			r.Sizes = append(r.Sizes, size)
		}
		sort.Float64s(r.Sizes)
		for _, size := range r.Sizes {
			r.Mean = append(r.Mean, a.sum[size]/float64(a.n[size]))
			r.Max = append(r.Max, a.max[size])
			r.SizeSamples = append(r.SizeSamples, a.n[size])
		}
		out = append(out, r)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Start.Before(out[j].Start) })
	return out
}

func compareRollups(t *testing.T, got, want []Rollup) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%d rollups, recomputation has %d", len(got), len(want))
	}
	for i := range want {
		g, w := got[i], want[i]
		if !g.Start.Equal(w.Start) || g.Step != w.Step || g.Samples != w.Samples ||
			!reflect.DeepEqual(g.Sizes, w.Sizes) || !reflect.DeepEqual(g.SizeSamples, w.SizeSamples) || !reflect.DeepEqual(g.Max, w.Max) {
			t.Fatalf("rollup %d:\n got %+v\nwant %+v", i, g, w)
		}
		for j := range w.Mean {
			if !near(g.Mean[j], w.Mean[j]) {
				t.Fatalf("rollup %d size %v: mean %v, recomputed %v", i, w.Sizes[j], g.Mean[j], w.Mean[j])
			}
		}
	}
}

func TestRollupsMatchRecomputation(t *testing.T) {
	s := quick(t)
	rng := rand.New(rand.NewPCG(1, 2))
	counters := []string{"pc-asm-1", "pc-asm-2", "pc-met"}
	var all []Reading
	for _, c := range counters {
		for i := 0; i < 400; i++ {
			// Random times over three hours, at nanosecond resolution, so
			// buckets get 0 to many samples.
			at := t0.Add(time.Duration(rng.Int64N(int64(3 * time.Hour))))
			r := reading(c, at, uint64(rng.IntN(5000)))
			if c == "pc-met" && at.After(t0.Add(90*time.Minute)) {
				// Channels reconfigured mid-series: 0.3 µm dropped, 0.2 µm added.
				r.Sizes = []float64{0.2, 0.5, 1, 5}
				r.Differential = true
			}
			all = append(all, r)
		}
	}
	rng.Shuffle(len(all), func(i, j int) { all[i], all[j] = all[j], all[i] })
	all = append(all, all[:50]...) // duplicates must not count
	for len(all) > 0 {
		n := min(len(all), 1+rng.IntN(97))
		appendOK(t, s, all[:n])
		all = all[n:]
	}
	for _, c := range counters {
		// 1m and 15m come from the readings, 1h is kept, 2h adds hours.
		for _, step := range []time.Duration{time.Minute, 15 * time.Minute, time.Hour, 2 * time.Hour} {
			t.Run(c+"/"+step.String(), func(t *testing.T) {
				compareRollups(t, rollupsAll(t, s, c, step), recompute(t, s, c, step))
			})
		}
	}
	for _, bad := range []time.Duration{7 * time.Minute, 90 * time.Second, 5 * time.Hour, 48 * time.Hour} {
		if err := s.ScanRollups("pc-met", bad, time.Time{}, time.Time{}, func(Rollup) error { return nil }); !errors.Is(err, ErrInvalid) {
			t.Fatalf("step %s: %v, want ErrInvalid", bad, err)
		}
	}
}

func TestRollupRange(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-gown", t0, 180)) // three hours
	var starts []time.Time
	_ = s.ScanRollups("pc-gown", time.Hour, t0.Add(time.Hour), t0.Add(3*time.Hour), func(r Rollup) error {
		starts = append(starts, r.Start)
		return nil
	})
	if len(starts) != 2 || !starts[0].Equal(t0.Add(time.Hour)) {
		t.Fatalf("hour rollups in [1h, 3h): %v", starts)
	}
}

func TestDamagedRollupIsRebuilt(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-asm-1", t0, 30))
	compactOK(t, s) // rollups are kept for what compaction moved into chunks
	// Damage the hour rollup by hand.
	err := s.db.Update(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketRollup1h).Bucket([]byte("pc-asm-1")).Put(nanosKey(t0.UnixNano()), []byte{codecV1, 0xde, 0xad, 0xbe, 0xef})
	})
	if err != nil {
		t.Fatal(err)
	}
	// Reading it reports the damage, naming the bucket.
	wantErr(t, s.ScanRollups("pc-asm-1", time.Hour, time.Time{}, time.Time{}, func(Rollup) error { return nil }), ErrCorrupt)
	// The next append in that hour still succeeds, and its compaction
	// repairs the bucket.
	appendOK(t, s, series("pc-asm-1", t0.Add(30*time.Minute), 5))
	compactOK(t, s)
	compareRollups(t, rollupsAll(t, s, "pc-asm-1", time.Hour), recompute(t, s, "pc-asm-1", time.Hour))
	if acc, dup, err := s.AppendReadings(context.Background(), nil); acc != 0 || dup != 0 || err != nil {
		t.Fatalf("empty append: %d %d %v", acc, dup, err)
	}
}

// TestRollupRowsInsideRange: every row of a rolled-up query lies inside
// [from, to); a bucket cut by an edge covers only its readings inside,
// and its figures are those of exactly those readings.
func TestRollupRowsInsideRange(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-gown", t0, 240)) // 10:00 to 14:00
	compactOK(t, s)
	from, to := t0.Add(30*time.Minute), t0.Add(150*time.Minute) // 10:30 to 12:30
	cases := []struct {
		step    time.Duration
		samples []int
		starts  []time.Duration // after t0
		ends    []time.Duration
	}{
		{time.Hour, []int{30, 60, 30}, []time.Duration{30 * time.Minute, time.Hour, 2 * time.Hour}, []time.Duration{time.Hour, 2 * time.Hour, 150 * time.Minute}},
		{2 * time.Hour, []int{90, 30}, []time.Duration{30 * time.Minute, 2 * time.Hour}, []time.Duration{2 * time.Hour, 150 * time.Minute}},
		{15 * time.Minute, []int{15, 15, 15, 15, 15, 15, 15, 15}, nil, nil},
	}
	for _, c := range cases {
		t.Run(c.step.String(), func(t *testing.T) {
			var rows []Rollup
			if err := s.ScanRollups("pc-gown", c.step, from, to, func(r Rollup) error { rows = append(rows, r); return nil }); err != nil {
				t.Fatal(err)
			}
			if len(rows) != len(c.samples) {
				t.Fatalf("%d rows, want %d", len(rows), len(c.samples))
			}
			for i, r := range rows {
				if r.Start.Before(from) || r.End.After(to) || !r.End.After(r.Start) || r.Samples != c.samples[i] {
					t.Fatalf("row %d: [%s, %s) %d samples", i, r.Start, r.End, r.Samples)
				}
				if c.starts != nil && (!r.Start.Equal(t0.Add(c.starts[i])) || !r.End.Equal(t0.Add(c.ends[i]))) {
					t.Fatalf("row %d: [%s, %s), want [%s, %s)", i, r.Start, r.End, t0.Add(c.starts[i]), t0.Add(c.ends[i]))
				}
				// The mean at 0.3 µm, summed here from the row's own readings.
				var sum float64
				rs := scanAll(t, s, "pc-gown", r.Start, r.End)
				for _, rd := range rs {
					sum += rd.PerM3()[0]
				}
				if len(rs) != r.Samples || !near(r.Mean[0], sum/float64(len(rs))) {
					t.Fatalf("row %d: mean %v over %d, recomputed %v over %d", i, r.Mean[0], r.Samples, sum/float64(len(rs)), len(rs))
				}
			}
		})
	}
}
