package store

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math"

	bolt "go.etcd.io/bbolt"
)

// Environment chunks hold the samples of one environment sensor behind
// the head, under echunks/<sensor>/<time of the last sample>, as pressure
// chunks do (the header is a reading chunk's, so chunkHeader and
// chunkTimes read it):
//
//	codecChunk | uvarint n | times as in a reading chunk |
//	  has:    uvarint runs | (byte Has, uvarint run)… |
//	  values: for each quantity some sample of the chunk carries, in the
//	    order temperature, humidity, velocity, over the samples carrying it:
//	    form 1 | uvarint u | varint (q − previous q)…  where v = q·u/1000:
//	      every value is a whole number of thousandths of its unit (m°C,
//	      0.001 %RH, mm/s) and u is the greatest common divisor of them
//	      (1 when all are 0), so a probe reading 0.1 °C steps pays for
//	      steps of 1 rather than of 100;
//	    form 0 | uvarint (float64 bits XOR the previous value's bits)…
//	      otherwise |
//	  tags:   n bytes, the tag of each sample's head value |
//	CRC-32C of key ‖ the above
//
// A T/RH probe sending one decimal once a minute costs about three bytes
// a sample (BenchmarkEnvChunkSize): a byte per quantity and the tag, the
// times and the Has set almost nothing. Every sample turns back into the
// bytes its head value had, which the audit chain covers.
var bucketEChunks = []byte("echunks") // sensor → time of last sample → chunk

// echunkSample is an environment sample as a chunk holds it.
type echunkSample struct {
	ns     int64
	has    EnvFields
	vals   [3]float64 // aligned with EnvTemperature, EnvHumidity, EnvVelocity; 0 when not in has
	tag    byte       // tagOf its head value, once known (hasTag)
	hasTag bool
}

func (e *echunkSample) sample(sensor string) EnvSample {
	return EnvSample{Sensor: sensor, Time: nsTime(e.ns), Has: e.has, TemperatureC: e.vals[0], HumidityPct: e.vals[1], VelocityMS: e.vals[2]}
}

// v1Value is the head value of the sample under key.
func (e *echunkSample) v1Value(key []byte) []byte {
	s := e.sample("")
	return encodeEnv(key, &s)
}

func fromEnv(e *EnvSample) echunkSample {
	out := echunkSample{ns: e.Time.UnixNano(), has: e.Has}
	for i, v := range e.values() {
		if e.Has&(1<<i) != 0 {
			out.vals[i] = v
		}
	}
	return out
}

var envQuantity = [3]string{"TemperatureC", "HumidityPct", "VelocityMS"}

// encodeEChunk encodes samples in strictly ascending time; key is the
// 8-byte time of the last.
func encodeEChunk(key []byte, es []echunkSample) []byte {
	b := make([]byte, 0, 32+len(es)*4)
	b = append(b, codecChunk)
	b = binary.AppendUvarint(b, uint64(len(es)))
	b = binary.AppendVarint(b, es[0].ns)
	var dods []int64
	var prev, delta int64 = es[0].ns, 0
	for _, e := range es[1:] {
		d := e.ns - prev
		dods = append(dods, d-delta)
		prev, delta = e.ns, d
	}
	b = appendRuns(b, len(dods), func(i, j int) bool { return dods[i] == dods[j] }, func(b []byte, i, run int) []byte {
		b = binary.AppendVarint(b, dods[i])
		return binary.AppendUvarint(b, uint64(run))
	})
	b = appendRuns(b, len(es), func(i, j int) bool { return es[i].has == es[j].has }, func(b []byte, i, run int) []byte {
		b = append(b, byte(es[i].has))
		return binary.AppendUvarint(b, uint64(run))
	})
	var vals []float64
	for q := range envQuantity {
		vals = vals[:0]
		for i := range es {
			if es[i].has&(1<<q) != 0 {
				vals = append(vals, es[i].vals[q])
			}
		}
		if len(vals) > 0 {
			b = appendEnvValues(b, vals)
		}
	}
	for i := range es {
		if es[i].hasTag {
			b = append(b, es[i].tag)
		} else {
			b = append(b, tagOf(es[i].v1Value(nanosKey(es[i].ns))))
		}
	}
	return seal(key, b)
}

// appendEnvValues writes the values of one quantity in form 1 when each
// is a whole number of thousandths, in form 0 otherwise.
func appendEnvValues(b []byte, vals []float64) []byte {
	ms := make([]int64, len(vals))
	var u uint64
	for i, v := range vals {
		m, ok := milli(v)
		if !ok {
			b = append(b, 0)
			var last uint64
			for _, v := range vals {
				bits := math.Float64bits(v)
				b = binary.AppendUvarint(b, bits^last)
				last = bits
			}
			return b
		}
		ms[i] = m
		u = gcd(u, uint64(max(m, -m)))
	}
	u = max(u, 1)
	b = append(b, 1)
	b = binary.AppendUvarint(b, u)
	var last int64
	for _, m := range ms {
		q := m / int64(u)
		b = binary.AppendVarint(b, q-last)
		last = q
	}
	return b
}

// decodeEChunk checks and decodes an environment chunk; on a checksum
// mismatch it still returns what decoded, for Verify to name samples by
// their tags. Anything else malformed is ErrCorrupt with nothing decoded.
func decodeEChunk(sensor string, key, v []byte) ([]echunkSample, []byte, error) {
	fail := func(err error) ([]echunkSample, []byte, error) {
		return nil, nil, fmt.Errorf("%w: environment chunk of sensor %q ending %s: %v", ErrCorrupt, sensor, keyString(key), err)
	}
	times := chunkTimes(key, v)
	if times == nil {
		return fail(fmt.Errorf("times do not decode"))
	}
	for _, ns := range []int64{times[0], times[len(times)-1]} {
		if why := checkTime(nsTime(ns)); why != "" {
			return fail(fmt.Errorf("Time: %s", why))
		}
	}
	body, tail := v[:len(v)-crcLen], v[len(v)-crcLen:]
	sumOK := crc32.Update(crc32.Checksum(key, crcTable), crcTable, body) == binary.LittleEndian.Uint32(tail)
	d := decoder{b: body[1:]}
	d.uvarint("n")
	d.varint("first")
	runs := d.uvarint("time runs")
	for r := uint64(0); r < runs && d.err == nil; r++ {
		d.varint("time")
		d.uvarint("time run")
	}
	es := make([]echunkSample, len(times))
	for i := range es {
		es[i].ns = times[i]
	}
	runs = d.uvarint("Has runs")
	i := 0
	for r := uint64(0); r < runs && d.err == nil; r++ {
		has, run := EnvFields(d.byte1("Has")), d.uvarint("Has run")
		switch {
		case d.err != nil:
		case has == 0 || has&^envAll != 0:
			d.fail("Has run %d: %#x is not a set of quantities", r, uint8(has))
		case run == 0 || run > uint64(len(es)-i):
			d.fail("Has run of %d with %d samples left", run, len(es)-i)
		default:
			for range run {
				es[i].has = has
				i++
			}
		}
	}
	if d.err == nil && i != len(es) {
		d.fail("Has covers %d of %d samples", i, len(es))
	}
	for q := range envQuantity {
		if d.err == nil {
			decodeEnvValues(&d, es, q)
		}
	}
	for i := range es {
		if d.err != nil {
			break
		}
		s := es[i].sample(sensor)
		if field, reason := checkEnvValues(&s); field != "" {
			d.fail("sample %d: %s: %s", i, field, reason)
		}
	}
	if d.err == nil && len(d.b) != len(es) {
		d.fail("%d tag bytes for %d samples", len(d.b), len(es))
	}
	if d.err != nil {
		return fail(d.err)
	}
	if !sumOK {
		return es, d.b, fmt.Errorf("%w: environment chunk of sensor %q ending %s: checksum mismatch: the chunk was changed after it was written", ErrCorrupt, sensor, keyString(key))
	}
	return es, d.b, nil
}

// maxMilli bounds a form-1 value in thousandths: milli refuses larger
// ones, and the bound keeps q·u and the sum of deltas inside an int64.
const maxMilli = 1 << 53

// decodeEnvValues reads quantity q of the samples carrying it.
func decodeEnvValues(d *decoder, es []echunkSample, q int) {
	bit := EnvFields(1 << q)
	n := 0
	for i := range es {
		if es[i].has&bit != 0 {
			n++
		}
	}
	if n == 0 {
		return
	}
	what := envQuantity[q]
	switch form := d.byte1(what + " form"); {
	case d.err != nil:
	case form == 1:
		u := d.uvarint(what + " unit")
		if d.err == nil && (u == 0 || u > maxMilli) {
			d.fail("%s: unit %d is not 1 to 2^53", what, u)
		}
		lim := int64(maxMilli / max(u, 1))
		var acc int64
		for i := 0; i < len(es) && d.err == nil; i++ {
			if es[i].has&bit == 0 {
				continue
			}
			// |acc| ≤ lim and |delta| ≤ 2·lim: no overflow before the check.
			delta := d.varint(what)
			if d.err == nil && (delta < -2*lim || delta > 2*lim || acc+delta < -lim || acc+delta > lim) {
				d.fail("sample %d: %s out of range", i, what)
			}
			acc += delta
			es[i].vals[q] = float64(acc*int64(u)) / 1000
		}
	case form == 0:
		var last uint64
		for i := 0; i < len(es) && d.err == nil; i++ {
			if es[i].has&bit != 0 {
				last ^= d.uvarint(what)
				es[i].vals[q] = math.Float64frombits(last)
			}
		}
	default:
		d.fail("%s: value form %d", what, form)
	}
}

// envSamples is how environment samples are kept (sampleiter.go).
var envSamples = &sampleKind[echunkSample, EnvSample]{
	head: bucketEnvironment, chunks: bucketEChunks,
	ns:          func(e *echunkSample) int64 { return e.ns },
	decodeChunk: decodeEChunk,
	fromChunk:   func(sensor string, e *echunkSample) EnvSample { return e.sample(sensor) },
	decodeHead:  decodeEnv,
	fromHead: func(sensor string, k, v []byte) (echunkSample, error) {
		e, err := decodeEnv(sensor, k, v)
		s := fromEnv(&e)
		s.tag, s.hasTag = tagOf(v), true
		return s, err
	},
	encodeChunk: encodeEChunk,
	setTag:      func(e *echunkSample, tag byte) { e.tag, e.hasTag = tag, true },
	what:        "environment",
	check:       func(x *EnvSample) (string, string) { return checkEnv(x) },
	prepare: func(x *EnvSample) (string, []byte, []byte) {
		key := timeKey(x.Time)
		return x.Sensor, key, encodeEnv(key, x)
	},
	recordKind: "environment sample",
	cover:      coverEnv,
	action:     AuditEnv,
	plural:     "environment samples",
	chunkValue: envValue,
}

func newEnvIter(tx *bolt.Tx, sensor string, lo, hi int64) *sampleIter[echunkSample, EnvSample] {
	return newSampleIter(tx, envSamples, sensor, lo, hi)
}

// compactEnvSensor moves the head samples of sensor into environment
// chunks, as compactSensor does for pressure.
func compactEnvSensor(tx *bolt.Tx, sensor string) (moved, chunks int, err error) {
	return compactSamples(tx, envSamples, sensor)
}

// envChunkAt decodes the chunk of sensor that would hold the sample at
// key: nil when none can (no chunk ends at or after it, or the next one
// starts after it).
func envChunkAt(tx *bolt.Tx, sensor string, key []byte) ([]echunkSample, error) {
	k, v, _ := chunkCovering(tx, bucketEChunks, sensor, key)
	if k == nil {
		return nil, nil
	}
	es, _, err := decodeEChunk(sensor, k, v)
	return es, err
}

// findEnv is the head value of the sample at ns in es, or nil.
func findEnv(es []echunkSample, ns int64) []byte {
	lo, hi := 0, len(es)
	for lo < hi {
		m := int(uint(lo+hi) >> 1)
		if es[m].ns < ns {
			lo = m + 1
		} else {
			hi = m
		}
	}
	if lo < len(es) && es[lo].ns == ns {
		return es[lo].v1Value(nanosKey(ns))
	}
	return nil
}

// envValue returns the head value of sensor's sample at key, head or
// chunk, or nil: what an append compares a repeated sample with.
func envValue(tx *bolt.Tx, sensor string, key []byte) ([]byte, error) {
	if b := tx.Bucket(bucketEnvironment).Bucket([]byte(sensor)); b != nil {
		if v := b.Get(key); v != nil {
			return v, nil
		}
	}
	es, err := envChunkAt(tx, sensor, key)
	if err != nil || es == nil {
		return nil, err
	}
	ns, _ := keyNanos(key)
	return findEnv(es, ns), nil
}

// lastEChunkNanos is the time of sensor's newest chunked sample, −1 if
// none: a sample after it cannot repeat a chunked one.
func lastEChunkNanos(tx *bolt.Tx, sensor string) int64 {
	return lastChunkIn(tx, bucketEChunks, sensor)
}

// envSensors lists the environment sensors with samples in the head or
// in chunks, in byte order.
func envSensors(tx *bolt.Tx) []string { return seriesNames(tx, bucketEnvironment, bucketEChunks) }

// sweepEChunks is sweepChunks for environment chunks.
func sweepEChunks(root *bolt.Bucket, limit int64, budget *int) (int, error) {
	return sweepChunked(root, limit, budget, func(name string, k, v []byte, limit int64) ([]byte, int, error) {
		es, _, err := decodeEChunk(name, k, v)
		if err != nil {
			return nil, 0, err
		}
		i := 0
		for i < len(es) && es[i].ns < limit {
			i++
		}
		return encodeEChunk(k, es[i:]), i, nil
	})
}
