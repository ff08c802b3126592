package classify

import "time"

// Rolling keeps the mean of the values observed in a trailing time window.
// The caller supplies every time (readings carry their own), so the state
// is reproducible in tests and after a restart. It is not safe for
// concurrent use.
type Rolling struct {
	Window time.Duration
	pts    []rollPoint
	sum    float64
}

type rollPoint struct {
	t time.Time
	v float64
}

// Add records v at time t. Values may arrive slightly out of order; they
// are kept in arrival order and expire by their own time.
func (r *Rolling) Add(t time.Time, v float64) {
	r.pts = append(r.pts, rollPoint{t, v})
	r.sum += v
}

// Mean returns the mean of the values with time in (now − Window, now] and
// how many there are; with none, ok is false and the mean must not be used.
func (r *Rolling) Mean(now time.Time) (mean float64, n int, ok bool) {
	r.expire(now)
	var s float64
	for _, p := range r.pts {
		if !p.t.After(now) {
			s += p.v
			n++
		}
	}
	if n == 0 {
		return 0, 0, false
	}
	return s / float64(n), n, true
}

// Latest returns the time of the newest value held, or the zero time.
func (r *Rolling) Latest() time.Time {
	var t time.Time
	for _, p := range r.pts {
		if p.t.After(t) {
			t = p.t
		}
	}
	return t
}

func (r *Rolling) expire(now time.Time) {
	cut := now.Add(-r.Window)
	i := 0
	for _, p := range r.pts {
		if p.t.After(cut) {
			r.pts[i] = p
			i++
		} else {
			r.sum -= p.v
		}
	}
	clear(r.pts[i:])
	r.pts = r.pts[:i]
}
