package store

import (
	"context"
	"encoding/binary"
	"fmt"
	"math"
	"time"
)

var bucketEnvironment = []byte("environment") // sensor → time → environment sample

// EnvFields says which quantities an environment sample carries.
type EnvFields uint8

// The quantities of an environment sample; a sample has any non-empty
// subset (a T/RH probe sends two, an airflow probe one).
const (
	EnvTemperature EnvFields = 1 << iota // TemperatureC
	EnvHumidity                          // HumidityPct
	EnvVelocity                          // VelocityMS
	envAll         = EnvTemperature | EnvHumidity | EnvVelocity
)

// EnvSample is one sample of a temperature, humidity or airflow-velocity
// sensor. Sensor and Time identify it, as for pressure. Only the fields
// named in Has are meaningful: a zero is a value, not "not sent".
type EnvSample struct {
	Sensor       string
	Time         time.Time
	Has          EnvFields
	TemperatureC float64 // °C
	HumidityPct  float64 // relative humidity, % (0 to 100)
	VelocityMS   float64 // air velocity, m/s (≥ 0)
}

// Plausibility bounds: only garbage is refused, the site's bands are the
// alarm rules' business. No cleanroom runs outside −50 to 100 °C (common
// practice, no source).
const (
	envMinC, envMaxC = -50, 100
	envMaxVelocity   = 100 // m/s; unidirectional flow is near 0.45 m/s (EU GMP Annex 1 guidance, from memory)
)

func checkEnv(e *EnvSample) (field, reason string) {
	if why := checkName(e.Sensor); why != "" {
		return "Sensor", why
	}
	if why := checkTime(e.Time); why != "" {
		return "Time", why
	}
	return checkEnvValues(e)
}

// checkEnvValues checks what a sample carries, not where it belongs: the
// part a chunk (echunk.go) checks for each sample it holds.
func checkEnvValues(e *EnvSample) (field, reason string) {
	if e.Has == 0 {
		return "Has", "no quantity: a sample carries temperature, humidity or velocity"
	}
	if e.Has&^envAll != 0 {
		return "Has", fmt.Sprintf("unknown quantities %#x", uint8(e.Has&^envAll))
	}
	if e.Has&EnvTemperature != 0 && (!finite(e.TemperatureC) || e.TemperatureC < envMinC || e.TemperatureC > envMaxC) {
		return "TemperatureC", fmt.Sprintf("%v °C is outside %d to %d °C", e.TemperatureC, envMinC, envMaxC)
	}
	if e.Has&EnvHumidity != 0 && (!finite(e.HumidityPct) || e.HumidityPct < 0 || e.HumidityPct > 100) {
		return "HumidityPct", fmt.Sprintf("%v %% is not a relative humidity (0 to 100 %%)", e.HumidityPct)
	}
	if e.Has&EnvVelocity != 0 && (!finite(e.VelocityMS) || e.VelocityMS < 0 || e.VelocityMS > envMaxVelocity) {
		return "VelocityMS", fmt.Sprintf("%v m/s is not an air velocity (0 to %d m/s)", e.VelocityMS, envMaxVelocity)
	}
	return "", ""
}

// values returns the fields in Has order with their flags.
func (e *EnvSample) values() [3]float64 {
	return [3]float64{e.TemperatureC, e.HumidityPct, e.VelocityMS}
}

// encodeEnv: version | Has | float64 per quantity present | CRC.
func encodeEnv(key []byte, e *EnvSample) []byte {
	b := make([]byte, 0, 2+24+crcLen)
	b = append(b, codecV1, byte(e.Has))
	for i, v := range e.values() {
		if e.Has&(1<<i) != 0 {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
		}
	}
	return seal(key, b)
}

func decodeEnv(sensor string, key, v []byte) (EnvSample, error) {
	fail := func(err error) (EnvSample, error) {
		return EnvSample{}, fmt.Errorf("%w: environment sample of sensor %q at %s: %v", ErrCorrupt, sensor, keyString(key), err)
	}
	t, body, err := openSealed(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	e := EnvSample{Sensor: sensor, Time: t, Has: EnvFields(d.byte1("Has"))}
	var vals [3]float64
	for i := range vals {
		if e.Has&(1<<i) != 0 {
			vals[i] = d.float("value")
		}
	}
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	e.TemperatureC, e.HumidityPct, e.VelocityMS = vals[0], vals[1], vals[2]
	if field, reason := checkEnv(&e); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return e, nil
}

// AppendEnvironment stores es in one durable transaction with the rules
// of AppendPressure: all or nothing (a *RecordError names the index and
// field of the first bad sample), a repeated sensor and time is a
// duplicate and is not stored again.
func (s *Store) AppendEnvironment(ctx context.Context, es []EnvSample) (accepted, duplicates int, err error) {
	return countOutcomes(appendSamples(ctx, s, envSamples, es))
}

// AppendEnvironmentMarked is AppendEnvironment that says what became of
// each sample, as AppendReadingsMarked does for readings.
func (s *Store) AppendEnvironmentMarked(ctx context.Context, es []EnvSample) ([]Outcome, error) {
	return appendSamples(ctx, s, envSamples, es)
}

// ScanEnvironment calls fn with each sample of sensor in [from, to),
// oldest first, with the same rules as ScanReadings (head and chunks
// merged).
func (s *Store) ScanEnvironment(sensor string, from, to time.Time, fn func(EnvSample) error) error {
	return scanSamples(s, envSamples, sensor, from, to, fn)
}

// LatestEnvironment returns the newest sample of sensor, head or chunk;
// false if none.
func (s *Store) LatestEnvironment(sensor string) (EnvSample, bool, error) {
	return latestSample(s, envSamples, sensor)
}

// EnvStat summarises one quantity over a rollup bucket.
type EnvStat struct {
	N              int // samples that carried the quantity
	Mean, Min, Max float64
}

// EnvRollup summarises the samples of one sensor in [Start, End): a
// bucket of Step, clipped to the range asked for as for Rollup.
type EnvRollup struct {
	Start, End time.Time
	Step       time.Duration
	Samples    int
	// Temperature, Humidity and Velocity are aligned with EnvTemperature,
	// EnvHumidity and EnvVelocity; a quantity no sample carried has N 0.
	Temperature, Humidity, Velocity EnvStat
}

// ScanEnvironmentRollups calls fn with the rollups of sensor at step over
// [from, to), oldest first; steps and edges as ScanRollups (rows inside
// the range, buckets aligned on hours and UTC days). They are computed
// from the samples: a sensor sends far fewer than a counter's readings.
func (s *Store) ScanEnvironmentRollups(sensor string, step time.Duration, from, to time.Time, fn func(EnvRollup) error) error {
	if err := checkStep(step); err != nil {
		return err
	}
	var cur *EnvRollup
	var sums [3]float64
	lo, hi := from, to
	flush := func() error {
		if cur == nil {
			return nil
		}
		stats := []*EnvStat{&cur.Temperature, &cur.Humidity, &cur.Velocity}
		for i, st := range stats {
			if st.N > 0 {
				st.Mean = sums[i] / float64(st.N)
			}
		}
		if !lo.IsZero() && cur.Start.Before(lo) {
			cur.Start = lo.UTC()
		}
		if !hi.IsZero() && cur.End.After(hi) {
			cur.End = hi.UTC()
		}
		r := *cur
		cur, sums = nil, [3]float64{}
		return fn(r)
	}
	err := s.ScanEnvironment(sensor, from, to, func(e EnvSample) error {
		ns := e.Time.UnixNano()
		start := nsTime(ns - ns%int64(step))
		if cur != nil && !cur.Start.Equal(start) { // not clipped before flush
			if err := flush(); err != nil {
				return err
			}
		}
		if cur == nil {
			cur = &EnvRollup{Start: start, End: start.Add(step), Step: step}
		}
		cur.Samples++
		stats := []*EnvStat{&cur.Temperature, &cur.Humidity, &cur.Velocity}
		for i, v := range e.values() {
			if e.Has&(1<<i) == 0 {
				continue
			}
			st := stats[i]
			if st.N == 0 || v < st.Min {
				st.Min = v
			}
			if st.N == 0 || v > st.Max {
				st.Max = v
			}
			st.N++
			sums[i] += v
		}
		return nil
	})
	if err != nil {
		return err
	}
	return flush()
}
