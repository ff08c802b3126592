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

// Reading is one minute of one counter as every peer receives it, for a
// caller that sends cleanmon the same readings: counter i is "pc-i"
// (pc-0 is the year's location, pc-1 to pc-N the live shape), Counts are
// cumulative per size of Sizes.
type Reading struct {
	Counter int
	Time    time.Time
	Counts  [4]int64
}

// Sizes are the particle sizes in µm of Reading.Counts, in order.
var Sizes = [4]string{"0.3", "0.5", "1", "5"}

// Readings calls live with every reading of the live shape, in the order
// Run posts them (time order across counters 1 to N), then, when o.Year,
// year with pc-0's year in time order. With the same Options (Seed, End
// and sizes) they are the readings Run sends each peer.
func Readings(o Options, live, year func(Reading)) error {
	o = o.withDefaults()
	if err := o.check(); err != nil {
		return err
	}
	src := newValueSource(o.Seed)
	endS := o.End.Unix()
	liveFrom := endS - int64(o.Minutes)*60
	for m := 0; m < o.Minutes; m++ {
		for c := 1; c <= o.Counters; c++ {
			live(Reading{Counter: c, Time: time.Unix(liveFrom+int64(m)*60, 0).UTC(), Counts: src.next()})
		}
	}
	if o.Year {
		yearFrom := endS - int64(o.YearMinutes)*60
		for i := 0; i < o.YearMinutes; i++ {
			year(Reading{Counter: 0, Time: time.Unix(yearFrom+int64(i)*60, 0).UTC(), Counts: src.next()})
		}
	}
	return nil
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

// batcher cuts line protocol into batches of a fixed number of lines.
type batcher struct {
	size, n int
	cur     []byte
	out     [][]byte
}

func (b *batcher) add(r Reading) {
	b.cur = appendLine(b.cur, reading{counter: r.Counter, t: r.Time.Unix(), n: r.Counts})
	if b.n++; b.n%b.size == 0 {
		b.out = append(b.out, b.cur)
		b.cur = nil
	}
}

func (b *batcher) done() [][]byte {
	if len(b.cur) > 0 {
		b.out = append(b.out, b.cur)
		b.cur = nil
	}
	return b.out
}

// buildWorkload turns Readings into line-protocol batches. o has its
// defaults and has been checked.
func buildWorkload(o Options) *workload {
	live, year := &batcher{size: o.Batch}, &batcher{size: o.Batch}
	_ = Readings(o, live.add, year.add)
	endS := o.End.Unix()
	w := &workload{live: live.done(), year: year.done()}
	w.liveCount = int64(o.Minutes) * int64(o.Counters)
	w.liveFrom = endS - int64(o.Minutes)*60
	w.liveTo = endS - 60
	if o.Year {
		w.yearCount = int64(o.YearMinutes)
		w.yearFrom = endS - int64(o.YearMinutes)*60
		w.yearTo = endS
	}
	return w
}

// lineCount counts newline-ended lines, to check a batch's size.
func lineCount(b []byte) int { return bytes.Count(b, []byte{'\n'}) }
