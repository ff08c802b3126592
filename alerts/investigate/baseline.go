package investigate

import (
	"math"
	"slices"
	"time"
)

// madScale turns a median absolute deviation into the standard deviation
// of a normal distribution (1/Φ⁻¹(3/4) ≈ 1.4826; common practice, no
// source beside the normal quantile).
const madScale = 1.4826

// baseline is a series' own normal: the median of its samples before the
// search span and their scaled MAD, floored so that a very quiet sensor
// does not make a tiny wobble look enormous.
type baseline struct {
	median, scale float64
	n             int
}

// median returns the middle value of v (mean of the two middle ones for an
// even count); v is not changed. NaN for an empty slice.
func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := slices.Clone(v)
	slices.Sort(s)
	m := len(s) / 2
	if len(s)%2 == 1 {
		return s[m]
	}
	return (s[m-1] + s[m]) / 2
}

// robustBaseline is the baseline of the points in [from, to) after the
// transform tr. ok is false with fewer than minBaseline points.
func robustBaseline(pts []Point, from, to time.Time, floor float64, tr func(float64) float64) (baseline, bool) {
	var v []float64
	for _, p := range pts {
		if !p.Time.Before(from) && p.Time.Before(to) {
			v = append(v, tr(p.Value))
		}
	}
	if len(v) < minBaseline {
		return baseline{n: len(v)}, false
	}
	m := median(v)
	dev := make([]float64, len(v))
	for i, x := range v {
		dev[i] = math.Abs(x - m)
	}
	return baseline{median: m, scale: math.Max(madScale*median(dev), floor), n: len(v)}, true
}

// minBaseline is the fewest samples a baseline is computed from.
const minBaseline = 5

func identity(v float64) float64 { return v }

// logConc puts concentrations on a log scale: their scatter grows with
// their level, so a deviation is judged as a ratio.
func logConc(v float64) float64 { return math.Log1p(math.Max(v, 0)) }

// deviation is one stretch of a series away from its baseline in the
// direction that matters.
type deviation struct {
	start, end time.Time // end: last point still away; zero when still away at the end of the span
	peakZ      float64   // largest directed robust z-score in the stretch
	peak       Point     // the raw point of peakZ
	extreme    Point     // the lowest raw point (falling) or highest (rising)
	points     []Point   // the raw points of the stretch
}

// deviations finds every stretch in [from, to] where the directed z-score
// (dir +1: rises count, −1: falls count, 0: both) reaches thr and that
// lasts at least minSpan (or holds one sample of a series sampled no
// faster than minSpan). A stretch ends when z falls below thr/2, so noise
// on the edge does not split one event into many.
func deviations(pts []Point, b baseline, tr func(float64) float64, dir int, from, to time.Time, thr float64, minSpan time.Duration) []deviation {
	z := func(v float64) float64 {
		d := (tr(v) - b.median) / b.scale
		switch {
		case dir > 0:
			return d
		case dir < 0:
			return -d
		}
		return math.Abs(d)
	}
	period := samplePeriod(pts)
	var out []deviation
	var cur *deviation
	flush := func(last bool) {
		if cur == nil {
			return
		}
		if last {
			cur.end = time.Time{}
		}
		n := len(cur.points)
		span := cur.points[n-1].Time.Sub(cur.points[0].Time)
		if span >= minSpan || (period >= minSpan && n >= 1) || (last && n >= 1 && cur.peakZ >= 2*thr) {
			out = append(out, *cur)
		}
		cur = nil
	}
	for _, p := range pts {
		if p.Time.Before(from) || p.Time.After(to) {
			continue
		}
		zz := z(p.Value)
		if cur == nil {
			if zz >= thr {
				cur = &deviation{start: p.Time, end: p.Time, peakZ: zz, peak: p, extreme: p}
				cur.points = append(cur.points, p)
			}
			continue
		}
		if zz < thr/2 {
			flush(false)
			continue
		}
		cur.points = append(cur.points, p)
		cur.end = p.Time
		if zz > cur.peakZ {
			cur.peakZ, cur.peak = zz, p
		}
		if (dir < 0 && p.Value < cur.extreme.Value) || (dir >= 0 && p.Value > cur.extreme.Value) {
			cur.extreme = p
		}
	}
	flush(true)
	return out
}

// samplePeriod is the median spacing of the points (0 for fewer than two).
func samplePeriod(pts []Point) time.Duration {
	if len(pts) < 2 {
		return 0
	}
	d := make([]float64, 0, len(pts)-1)
	for i := 1; i < len(pts); i++ {
		d = append(d, float64(pts[i].Time.Sub(pts[i-1].Time)))
	}
	return time.Duration(median(d))
}
