package peers

import (
	"bytes"
	"math"
	"math/rand/v2"
	"strconv"
	"time"
)

// The measurement, tag and field names the readings are written under.
// VictoriaMetrics turns measurement and field into one metric name,
// "particles_um0_3" and so on.
const (
	measurement = "particles"
	tagCounter  = "counter"
)

// channels are the four cumulative size channels of a reading, in µm.
var channels = [4]string{"um0_3", "um0_5", "um1", "um5"}

// reading is one minute of one counter: cumulative counts per channel,
// each channel at most the one below it.
type reading struct {
	counter int
	t       int64 // Unix seconds
	n       [4]int64
}

// valueSource invents plausible counts: the 0.3 µm count of a 28.3 L
// sample is log-normal around a few thousand, and each larger channel is
// a log-normal fraction of the one below. Invented data, for load only.
type valueSource struct{ r *rand.Rand }

func newValueSource(seed uint64) *valueSource {
	return &valueSource{r: rand.New(rand.NewPCG(seed, 0x6c6f61647465737))}
}

func (v *valueSource) next() [4]int64 {
	var n [4]int64
	x := math.Exp(math.Log(3000) + 0.6*v.r.NormFloat64())
	fractions := [3]float64{0.35, 0.3, 0.02}
	n[0] = int64(x)
	for i, f := range fractions {
		x *= math.Min(1, f*math.Exp(0.3*v.r.NormFloat64()))
		n[i+1] = int64(x)
	}
	return n
}

// appendLine appends one line-protocol line with a time in seconds.
func appendLine(b []byte, r reading) []byte {
	b = append(b, measurement+","+tagCounter+"=pc-"...)
	b = strconv.AppendInt(b, int64(r.counter), 10)
	for i, c := range channels {
		if i == 0 {
			b = append(b, ' ')
		} else {
			b = append(b, ',')
		}
		b = append(b, c...)
		b = append(b, '=')
		b = strconv.AppendInt(b, r.n[i], 10)
		b = append(b, 'i')
	}
	b = append(b, ' ')
	b = strconv.AppendInt(b, r.t, 10)
	return append(b, '\n')
}

// workload is the readings every peer receives, built once so each peer
// is sent the same bytes and building them is not timed.
type workload struct {
	live      [][]byte // batches of the live shape, in time order
	liveCount int64
	liveFrom  int64 // first and last reading time of the live shape, Unix seconds
	liveTo    int64
	year      [][]byte // batches of counter pc-0's year
	yearCount int64
	yearFrom  int64
	yearTo    int64 // one minute after the last year reading
}

// buildWorkload makes the live shape (counters 1..N, one reading a minute
// each, time order across all counters, the last minute ending at end)
// and, when years > 0, yearMinutes per-minute readings of counter pc-0
// ending at the same minute.
func buildWorkload(o Options, end time.Time) *workload {
	w := &workload{}
	src := newValueSource(o.Seed)
	endS := end.Truncate(time.Minute).Unix()
	w.liveFrom = endS - int64(o.Minutes)*60
	var cur []byte
	k := 0
	for m := 0; m < o.Minutes; m++ {
		for c := 1; c <= o.Counters; c++ {
			cur = appendLine(cur, reading{counter: c, t: w.liveFrom + int64(m)*60, n: src.next()})
			if k++; k%o.Batch == 0 {
				w.live = append(w.live, cur)
				cur = nil
			}
		}
	}
	if len(cur) > 0 {
		w.live = append(w.live, cur)
	}
	w.liveCount = int64(o.Minutes) * int64(o.Counters)
	w.liveTo = w.liveFrom + int64(o.Minutes-1)*60
	if o.Year {
		w.yearFrom = endS - int64(o.YearMinutes)*60
		w.yearTo = endS
		cur = nil
		for i := 0; i < o.YearMinutes; i++ {
			cur = appendLine(cur, reading{counter: 0, t: w.yearFrom + int64(i)*60, n: src.next()})
			if (i+1)%o.Batch == 0 {
				w.year = append(w.year, cur)
				cur = nil
			}
		}
		if len(cur) > 0 {
			w.year = append(w.year, cur)
		}
		w.yearCount = int64(o.YearMinutes)
	}
	return w
}

// lineCount counts newline-ended lines, to check a batch's size.
func lineCount(b []byte) int { return bytes.Count(b, []byte{'\n'}) }
