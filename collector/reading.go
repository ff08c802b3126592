package collector

import (
	"bytes"
	"math"
	"strconv"
	"time"

	"cleanmon/classify"
)

// Status values a counter may report with a reading. Readings of every
// status are stored (nothing is dropped silently); the status tells the
// alarm engine how far to trust them.
const (
	// StatusOK: the instrument reports nothing wrong (the default).
	StatusOK = "ok"
	// StatusWarning: the instrument flags a condition (flow marginal, laser
	// ageing, filter due) but stands by its counts.
	StatusWarning = "warning"
	// StatusFault: the instrument says its counts are not valid; an
	// instrument alarm, and no class decision on them.
	StatusFault = "fault"
)

// Reading is a validated, normalised particle-count sample ready to store.
type Reading struct {
	Counter       string
	Zone          string    // the counter's zone, from the registry
	Location      string    // the counter's sampling location, from the registry
	Time          time.Time // UTC
	VolumeL       float64   // sampled volume, litres
	FlowLPM       float64   // reported flow, L/min; 0 = not reported
	SampleSeconds float64   // reported sampling time, s; 0 = not reported
	Status        string    // StatusOK, StatusWarning or StatusFault
	Differential  bool      // Counts as received were per channel
	Sizes         []float64 // the counter's channels, ascending; shared with the registry, do not modify
	Counts        []uint64  // as received, aligned with Sizes
	PerM3         []float64 // cumulative concentration at or above each size, particles/m³
	// OverRange is set when the concentration at the smallest size is at or
	// beyond the counter's stated maximum (Counter.MaxPerM3): coincidence
	// loss makes such counts untrustworthy (ISO 21501-4), so they are
	// flagged, not believed.
	OverRange bool
}

// Cumulative returns the counts at or above each size (Counts itself when
// they were received cumulative).
func (r *Reading) Cumulative() []uint64 {
	if !r.Differential {
		return r.Counts
	}
	out := make([]uint64, len(r.Counts))
	var sum uint64
	for i := len(r.Counts) - 1; i >= 0; i-- {
		sum += r.Counts[i]
		out[i] = sum
	}
	return out
}

// Raw turns the reading back into the form it was submitted in, so that
// it can be sent again (to another daemon, or through validation again).
func (r *Reading) Raw() RawReading {
	vol := r.VolumeL
	raw := RawReading{
		Counter: r.Counter,
		Time:    r.Time.UTC().Format(time.RFC3339Nano),
		VolumeL: &vol,
		Counts:  make(map[string]Count, len(r.Counts)),
		Mode:    string(ModeCumulative),
		FlowLPM: r.FlowLPM,
		SampleS: r.SampleSeconds,
		Status:  r.Status,
	}
	if r.Differential {
		raw.Mode = string(ModeDifferential)
	}
	for i, n := range r.Counts {
		raw.Counts[classify.FormatSize(r.Sizes[i])] = Count{N: n}
	}
	return raw
}

// Pressure is a validated differential-pressure sample ready to store.
type Pressure struct {
	Sensor string
	Time   time.Time // UTC
	Pa     float64
}

// Raw turns the sample back into its submitted form.
func (p *Pressure) Raw() RawPressure {
	pa := p.Pa
	return RawPressure{Sensor: p.Sensor, Time: p.Time.UTC().Format(time.RFC3339Nano), Pa: &pa}
}

// RawReading is a particle-count reading as sent to POST /api/v1/readings
// (the documented API), before validation:
//
//	{"counter":"pc-asm-1","time":"2026-03-02T10:00:00Z","volume_l":28.3,
//	 "counts":{"0.3":1200,"0.5":310,"5":2},"mode":"cumulative",
//	 "flow_lpm":28.3,"sample_s":60,"status":"ok"}
//
// Count keys are sizes in µm, "0.5" or "0.5um". mode defaults to the
// counter's configured mode, status to "ok"; flow_lpm and sample_s are
// optional.
type RawReading struct {
	Counter string           `json:"counter"`
	Time    string           `json:"time"`               // RFC 3339
	VolumeL *float64         `json:"volume_l,omitempty"` // litres; nil = missing
	Counts  map[string]Count `json:"counts"`
	Mode    string           `json:"mode,omitempty"`
	FlowLPM float64          `json:"flow_lpm,omitempty"` // 0 = not reported
	SampleS float64          `json:"sample_s,omitempty"` // sampling time, s; 0 = not reported
	Status  string           `json:"status,omitempty"`
}

// reset empties r for the next element while keeping the counts map, so
// that a stream of readings does not allocate a map each.
func (r *RawReading) reset() {
	m := r.Counts
	clear(m)
	*r = RawReading{Counts: m}
}

// RawPressure is a DP sample as sent to POST /api/v1/pressure:
// {"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12.4}.
type RawPressure struct {
	Sensor string   `json:"sensor"`
	Time   string   `json:"time"` // RFC 3339
	Pa     *float64 `json:"pa"`   // nil = missing
}

func (p *RawPressure) reset() { *p = RawPressure{} }

// maxCount is 2^53, the largest integer every JSON reader keeps exactly.
const maxCount = 1 << 53

// Count is one channel's count. Programs set N; from JSON it is read
// without passing through a float, so that a fraction, a negative number,
// a string or a value beyond 2^53 is reported as such instead of being
// rounded into a plausible count.
type Count struct {
	N uint64 // particles counted

	bad string // the JSON text when it is not a usable count
}

// UnmarshalJSON reads a JSON number. It never fails: a value that is not a
// count is kept and rejected by validation, which can name the field.
func (c *Count) UnmarshalJSON(b []byte) error {
	*c = Count{}
	if n, ok := plainCount(b); ok {
		c.N = n
		return nil
	}
	// 1200.0 or 1.2e3 from float-minded senders are still whole counts;
	// below 2^53, where a float is still exact.
	if len(b) > 0 && (b[0] == '-' || b[0] >= '0' && b[0] <= '9') && bytes.ContainsAny(b, ".eE-") {
		if v, err := strconv.ParseFloat(string(b), 64); err == nil && v >= 0 && v < maxCount && v == math.Trunc(v) {
			c.N = uint64(v)
			return nil
		}
	}
	c.bad = string(b)
	return nil
}

// plainCount parses a run of decimal digits not above 2^53.
func plainCount(b []byte) (uint64, bool) {
	if len(b) == 0 || len(b) > 16 {
		return 0, false
	}
	var n uint64
	for _, d := range b {
		if d < '0' || d > '9' {
			return 0, false
		}
		n = n*10 + uint64(d-'0')
	}
	return n, n <= maxCount
}

// MarshalJSON writes the count as a JSON number (or, for a value that
// arrived unusable, the text it arrived as).
func (c Count) MarshalJSON() ([]byte, error) {
	if c.bad != "" {
		return []byte(c.bad), nil
	}
	return strconv.AppendUint(nil, c.N, 10), nil
}

// problem says why the count cannot be used, or "".
func (c Count) problem() string {
	if c.bad == "" {
		if c.N > maxCount {
			return "count " + strconv.FormatUint(c.N, 10) + " is beyond 2^53, the largest whole number JSON keeps exactly"
		}
		return ""
	}
	switch b := c.bad; {
	case b[0] == '"':
		return "must be a number, not a string"
	case b == "null" || b == "true" || b == "false" || b[0] == '{' || b[0] == '[':
		return "must be a number, not " + kindOf(b)
	}
	v, err := strconv.ParseFloat(c.bad, 64)
	switch {
	case c.bad[0] == '-':
		return "count " + c.bad + " is negative"
	case err == nil && v != math.Trunc(v):
		return "count " + c.bad + " is not a whole number"
	default:
		return "count " + c.bad + " is beyond 2^53, the largest whole number JSON keeps exactly"
	}
}

func kindOf(b string) string {
	switch {
	case b == "null":
		return "null"
	case b == "true" || b == "false":
		return "a boolean"
	case b[0] == '{':
		return "an object"
	default:
		return "an array"
	}
}
