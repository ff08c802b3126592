package store

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math"

	bolt "go.etcd.io/bbolt"
)

// Pressure chunks hold the samples of one DP sensor behind the head,
// under pchunks/<sensor>/<time of the last sample>, like reading chunks:
//
//	codecChunk | uvarint n | times as in a reading chunk |
//	  values: per sample, varint (v − previous v) where v is Pa in whole
//	  millipascals when every sample of the chunk is one (flag 1), or the
//	  float64 bits XOR the previous sample's otherwise (flag 0) |
//	  tags: n bytes | CRC-32C of key ‖ the above
//
// Sensors report a few decimals, so the millipascal form is the usual
// one: a steady room costs a byte or two per sample. Every sample turns
// back into the bytes its head value had, which the audit chain covers.
var bucketPChunks = []byte("pchunks") // sensor → time of last sample → chunk

type pchunkSample struct {
	ns     int64
	pa     float64
	tag    byte
	hasTag bool
}

func (p *pchunkSample) v1Value(key []byte) []byte {
	return encodePressure(key, &Pressure{Pa: p.pa})
}

func milli(pa float64) (int64, bool) {
	if pa == 0 && math.Signbit(pa) {
		return 0, false // −0 must come back as −0
	}
	m := math.Round(pa * 1000)
	if math.Abs(m) > 1<<53 || m/1000 != pa || math.Signbit(pa) != math.Signbit(m/1000) {
		return 0, false
	}
	return int64(m), true
}

func encodePChunk(key []byte, ps []pchunkSample) []byte {
	b := make([]byte, 0, 32+len(ps)*4)
	b = append(b, codecChunk)
	b = binary.AppendUvarint(b, uint64(len(ps)))
	b = binary.AppendVarint(b, ps[0].ns)
	var dods []int64
	var prev, delta int64 = ps[0].ns, 0
	for _, p := range ps[1:] {
		d := p.ns - prev
		dods = append(dods, d-delta)
		prev, delta = p.ns, d
	}
	b = appendRuns(b, len(dods), func(i, j int) bool { return dods[i] == dods[j] }, func(b []byte, i, run int) []byte {
		b = binary.AppendVarint(b, dods[i])
		return binary.AppendUvarint(b, uint64(run))
	})
	asMilli := true
	for _, p := range ps {
		if _, ok := milli(p.pa); !ok {
			asMilli = false
			break
		}
	}
	if asMilli {
		b = append(b, 1)
		var last int64
		for _, p := range ps {
			m, _ := milli(p.pa)
			b = binary.AppendVarint(b, m-last)
			last = m
		}
	} else {
		b = append(b, 0)
		var last uint64
		for _, p := range ps {
			bits := math.Float64bits(p.pa)
			b = binary.AppendUvarint(b, bits^last)
			last = bits
		}
	}
	for _, p := range ps {
		if p.hasTag {
			b = append(b, p.tag)
		} else {
			b = append(b, tagOf(p.v1Value(nanosKey(p.ns))))
		}
	}
	return seal(key, b)
}

// decodePChunk checks and decodes a pressure chunk; on a checksum
// mismatch it still returns what decoded, for Verify to name samples by
// their tags.
func decodePChunk(sensor string, key, v []byte) ([]pchunkSample, []byte, error) {
	fail := func(err error) ([]pchunkSample, []byte, error) {
		return nil, nil, fmt.Errorf("%w: pressure chunk of sensor %q ending %s: %v", ErrCorrupt, sensor, keyString(key), err)
	}
	times := chunkTimes(key, v)
	if times == nil {
		return fail(fmt.Errorf("times do not decode"))
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
	form := d.byte1("value form")
	ps := make([]pchunkSample, len(times))
	var lastM int64
	var lastBits uint64
	for i := range ps {
		ps[i].ns = times[i]
		switch form {
		case 1:
			lastM += d.varint("Pa")
			ps[i].pa = float64(lastM) / 1000
		case 0:
			lastBits ^= d.uvarint("Pa")
			ps[i].pa = math.Float64frombits(lastBits)
		default:
			d.fail("value form %d", form)
		}
		if d.err == nil && !finite(ps[i].pa) {
			d.fail("sample %d: %v is not a pressure", i, ps[i].pa)
		}
	}
	if d.err == nil && len(d.b) != len(ps) {
		d.fail("%d tag bytes for %d samples", len(d.b), len(ps))
	}
	if d.err != nil {
		return fail(d.err)
	}
	if !sumOK {
		return ps, d.b, fmt.Errorf("%w: pressure chunk of sensor %q ending %s: checksum mismatch: the chunk was changed after it was written", ErrCorrupt, sensor, keyString(key))
	}
	return ps, d.b, nil
}

// pressureSamples is how DP samples are kept (sampleiter.go).
var pressureSamples = &sampleKind[pchunkSample, Pressure]{
	head: bucketPressure, chunks: bucketPChunks,
	ns:          func(p *pchunkSample) int64 { return p.ns },
	decodeChunk: decodePChunk,
	fromChunk: func(sensor string, p *pchunkSample) Pressure {
		return Pressure{Sensor: sensor, Time: nsTime(p.ns), Pa: p.pa}
	},
	decodeHead: decodePressure,
	fromHead: func(sensor string, k, v []byte) (pchunkSample, error) {
		p, err := decodePressure(sensor, k, v)
		return pchunkSample{ns: p.Time.UnixNano(), pa: p.Pa, tag: tagOf(v), hasTag: true}, err
	},
	encodeChunk: encodePChunk,
	setTag:      func(p *pchunkSample, tag byte) { p.tag, p.hasTag = tag, true },
	what:        "pressure",
	check:       func(x *Pressure) (string, string) { return checkPressure(x) },
	prepare: func(x *Pressure) (string, []byte, []byte) {
		key := timeKey(x.Time)
		return x.Sensor, key, encodePressure(key, x)
	},
	recordKind: "pressure",
	cover:      coverPressure,
	action:     AuditPressure,
	plural:     "pressure samples",
	chunkValue: pressureValue,
}

func newPressureIter(tx *bolt.Tx, sensor string, lo, hi int64) *sampleIter[pchunkSample, Pressure] {
	return newSampleIter(tx, pressureSamples, sensor, lo, hi)
}

// compactSensor moves the head samples of sensor into pressure chunks, as
// compactCounter does for readings.
func compactSensor(tx *bolt.Tx, sensor string) (moved, chunks int, err error) {
	return compactSamples(tx, pressureSamples, sensor)
}

// pressureValue returns the schema-1 value of sensor's sample at key,
// head or chunk, or nil.
func pressureValue(tx *bolt.Tx, sensor string, key []byte) ([]byte, error) {
	if b := tx.Bucket(bucketPressure).Bucket([]byte(sensor)); b != nil {
		if v := b.Get(key); v != nil {
			return v, nil
		}
	}
	k, v, ns := chunkCovering(tx, bucketPChunks, sensor, key)
	if k == nil {
		return nil, nil
	}
	ps, _, err := decodePChunk(sensor, k, v)
	if err != nil {
		return nil, err
	}
	for i := range ps {
		if ps[i].ns == ns {
			return ps[i].v1Value(key), nil
		}
	}
	return nil, nil
}

// lastPChunkNanos is the time of sensor's newest chunked sample, −1 if none.
func lastPChunkNanos(tx *bolt.Tx, sensor string) int64 {
	return lastChunkIn(tx, bucketPChunks, sensor)
}
