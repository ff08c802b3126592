package store

import (
	"context"
	"encoding/binary"
	"fmt"
	"math"
	"time"

	bolt "go.etcd.io/bbolt"
)

// bucketEnvironment holds temperature, humidity and airflow-velocity
// samples: sensor → time → sample, one value per sample.
var bucketEnvironment = []byte("environment")

// EnvSample is one environment sample. Only the channels its sensor
// reports are set (the Has flags say which).
type EnvSample struct {
	Sensor         string
	Time           time.Time
	TemperatureC   float64 // valid when HasTemperature
	HumidityPct    float64 // relative humidity in %, valid when HasHumidity
	VelocityMS     float64 // airflow velocity in m/s, valid when HasVelocity
	HasTemperature bool
	HasHumidity    bool
	HasVelocity    bool
}

// Channel bits of an encoded sample, in this order after the bits.
const (
	envTemperature = 1 << iota
	envHumidity
	envVelocity
	envAll = envTemperature | envHumidity | envVelocity
)

func checkEnvSample(e *EnvSample) (field, reason string) {
	if why := checkName(e.Sensor); why != "" {
		return "Sensor", why
	}
	if why := checkTime(e.Time); why != "" {
		return "Time", why
	}
	if !e.HasTemperature && !e.HasHumidity && !e.HasVelocity {
		return "Has", "no channel: a sample carries at least one value"
	}
	for _, c := range []struct {
		has  bool
		v    float64
		name string
	}{{e.HasTemperature, e.TemperatureC, "TemperatureC"}, {e.HasHumidity, e.HumidityPct, "HumidityPct"}, {e.HasVelocity, e.VelocityMS, "VelocityMS"}} {
		if c.has && !finite(c.v) {
			return c.name, fmt.Sprintf("%v is not a value", c.v)
		}
	}
	return "", ""
}

func encodeEnvSample(key []byte, e *EnvSample) []byte {
	b := make([]byte, 0, 2+3*8+crcLen)
	b = append(b, codecV1)
	var bits byte
	if e.HasTemperature {
		bits |= envTemperature
	}
	if e.HasHumidity {
		bits |= envHumidity
	}
	if e.HasVelocity {
		bits |= envVelocity
	}
	b = append(b, bits)
	for _, c := range []struct {
		has bool
		v   float64
	}{{e.HasTemperature, e.TemperatureC}, {e.HasHumidity, e.HumidityPct}, {e.HasVelocity, e.VelocityMS}} {
		if c.has {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(c.v))
		}
	}
	return seal(key, b)
}

func decodeEnvSample(sensor string, key, v []byte) (EnvSample, error) {
	fail := func(err error) (EnvSample, error) {
		return EnvSample{}, fmt.Errorf("%w: environment sample of sensor %q at %s: %v", ErrCorrupt, sensor, keyString(key), err)
	}
	t, ok := keyTime(key)
	if !ok {
		return fail(fmt.Errorf("key is not an 8-byte time"))
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	bits := d.byte1("channels")
	if bits&^envAll != 0 {
		return fail(fmt.Errorf("unknown channel bits %08b", bits))
	}
	e := EnvSample{Sensor: sensor, Time: t}
	if bits&envTemperature != 0 {
		e.TemperatureC, e.HasTemperature = d.float("TemperatureC"), true
	}
	if bits&envHumidity != 0 {
		e.HumidityPct, e.HasHumidity = d.float("HumidityPct"), true
	}
	if bits&envVelocity != 0 {
		e.VelocityMS, e.HasVelocity = d.float("VelocityMS"), true
	}
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if field, reason := checkEnvSample(&e); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return e, nil
}

// CommitEnvironment stores es in one transaction, fsynced before it
// returns (the sender is acknowledged only after): all or nothing, and a
// sample with the sensor and time of one stored is a duplicate, counted
// and not stored again.
func (s *Store) CommitEnvironment(ctx context.Context, es []EnvSample) (accepted, duplicates int, err error) {
	if err := s.enter(); err != nil {
		return 0, 0, err
	}
	defer s.exit()
	if len(es) == 0 {
		return 0, 0, ctx.Err()
	}
	type prepared struct {
		sensor   string
		key, val []byte
	}
	prep := make([]prepared, len(es))
	for i := range es {
		e := &es[i]
		if field, reason := checkEnvSample(e); field != "" {
			return 0, 0, &RecordError{Kind: "environment", Index: i, Field: field, Reason: reason}
		}
		key := timeKey(e.Time)
		prep[i] = prepared{sensor: e.Sensor, key: key, val: encodeEnvSample(key, e)}
	}
	var acc, dup int
	err = s.submit(ctx, len(prep), func(tx *bolt.Tx) error {
		acc, dup = 0, 0
		series := newSeriesBuckets(tx, bucketEnvironment)
		for i := range prep {
			b, err := series.get(prep[i].sensor)
			if err != nil {
				return err
			}
			if b.Get(prep[i].key) != nil {
				dup++
				continue
			}
			if err := b.Put(prep[i].key, prep[i].val); err != nil {
				return fmt.Errorf("store: put environment sample of %q: %w", prep[i].sensor, err)
			}
			acc++
		}
		return nil
	})
	if err != nil {
		return 0, 0, err
	}
	return acc, dup, nil
}

// ScanEnvironment calls fn with each sample of sensor in [from, to),
// oldest first, with the same rules as ScanReadings.
func (s *Store) ScanEnvironment(sensor string, from, to time.Time, fn func(EnvSample) error) error {
	return scanSeries(s, bucketEnvironment, sensor, from, to, decodeEnvSample, fn)
}

// LatestEnvironment returns the newest sample of sensor; false if it has
// none.
func (s *Store) LatestEnvironment(sensor string) (EnvSample, bool, error) {
	return latestSeries(s, bucketEnvironment, sensor, decodeEnvSample)
}
