package store

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
)

// Reading chunks hold the readings of one counter behind the head, in
// time order, one bbolt value per chunk under chunks/<counter>/<time of
// its last reading>, so that Seek(from) lands on the one chunk that can
// hold from. A chunk value is
//
//	codecChunk | uvarint n |
//	  times:  varint first ns | uvarint runs | (varint delta-of-delta, uvarint run)… |
//	  shapes: uvarint runs | (uvarint run, str shape)… |
//	  counts: per reading, per channel: varint (count − the previous reading's count in that channel) |
//	  tags:   n bytes |
//	CRC-32C of key ‖ the above
//
// A shape is the part of a reading's schema-1 value between the version
// byte and the counts (flags, status, volume, flow, sample time, sizes):
// constant for long runs, so run-length coded. With it, every reading of
// a chunk turns back into exactly the value the head stored for it, which
// is what the audit chain's digests cover: compaction changes where a
// reading lives, not what Verify checks it against.
//
// The whole-chunk CRC finds any change; the tag of each reading (the low
// byte of its schema-1 value's CRC-32C) names which reading changed,
// missing one change in 256. The audit digests catch that one as well.
const (
	codecChunk = 2
	// maxChunkReadings bounds a chunk: a day and a half at one reading
	// a minute, small enough that decoding one to answer a point query or
	// a duplicate check costs well under a millisecond.
	maxChunkReadings = 2048
)

var bucketChunks = []byte("chunks") // counter → time of last reading → chunk

// chunkReading is a reading as a chunk holds it: its time, its shape and
// its counts (aligned with the sizes of the shape).
type chunkReading struct {
	ns     int64
	shape  []byte
	counts []uint64
	head   bool // read from the head: its shape is not shared with other readings
	tag    byte // tagOf its schema-1 value, once known (hasTag)
	hasTag bool
}

// v1Value is the schema-1 value of the reading under key.
func (c *chunkReading) v1Value(key []byte) []byte {
	b := make([]byte, 0, 1+len(c.shape)+3*len(c.counts)+crcLen)
	b = append(b, codecV1)
	b = append(b, c.shape...)
	for _, n := range c.counts {
		b = binary.AppendUvarint(b, n)
	}
	return seal(key, b)
}

// splitV1 cuts a checked schema-1 reading value into shape and counts.
func splitV1(key, val []byte) (shape []byte, counts []uint64, err error) {
	body, err := unseal(key, val)
	if err != nil {
		return nil, nil, err
	}
	nch, shapeLen, err := shapeChannels(body)
	if err != nil {
		return nil, nil, err
	}
	d := decoder{b: body[shapeLen:]}
	counts = make([]uint64, nch)
	for i := range counts {
		counts[i] = d.uvarint("Counts")
	}
	d.end()
	return body[:shapeLen], counts, d.err
}

// shapeChannels parses the shape at the start of b and returns its
// channel count and length.
func shapeChannels(b []byte) (nch, n int, err error) {
	d := decoder{b: b}
	flags := d.byte1("flags")
	d.byte1("Status")
	d.float("VolumeL")
	if flags&flagFlow != 0 {
		d.float("FlowLPM")
	}
	if flags&flagSampleTime != 0 {
		d.float("SampleSeconds")
	}
	sizes := d.sizes(flags&flagSizesFloat != 0)
	if d.err != nil {
		return 0, 0, d.err
	}
	return len(sizes), len(b) - len(d.b), nil
}

// tagOf is the low byte of a schema-1 value's own CRC-32C (over its key
// and body). Not a CRC over the sealed value: that is the same constant
// for every value, the residue of a CRC.
func tagOf(v1 []byte) byte { return v1[len(v1)-crcLen] }

// encodeChunk encodes readings in strictly ascending time; key is the
// 8-byte time of the last.
func encodeChunk(key []byte, rs []chunkReading) []byte {
	b := make([]byte, 0, 64+len(rs)*8)
	b = append(b, codecChunk)
	b = binary.AppendUvarint(b, uint64(len(rs)))
	b = binary.AppendVarint(b, rs[0].ns)
	// delta-of-delta runs
	var dods []int64
	var prev, delta int64 = rs[0].ns, 0
	for _, r := range rs[1:] {
		d := r.ns - prev
		dods = append(dods, d-delta)
		prev, delta = r.ns, d
	}
	b = appendRuns(b, len(dods), func(i, j int) bool { return dods[i] == dods[j] }, func(b []byte, i, run int) []byte {
		b = binary.AppendVarint(b, dods[i])
		return binary.AppendUvarint(b, uint64(run))
	})
	b = appendRuns(b, len(rs), func(i, j int) bool { return string(rs[i].shape) == string(rs[j].shape) }, func(b []byte, i, run int) []byte {
		b = binary.AppendUvarint(b, uint64(run))
		return appendBytes(b, rs[i].shape)
	})
	var last []uint64
	for _, r := range rs {
		for j, c := range r.counts {
			var p uint64
			if j < len(last) {
				p = last[j]
			}
			b = binary.AppendVarint(b, int64(c-p))
		}
		last = r.counts
	}
	for _, r := range rs {
		if r.hasTag {
			b = append(b, r.tag)
		} else {
			b = append(b, tagOf(r.v1Value(nanosKey(r.ns))))
		}
	}
	return seal(key, b)
}

// appendRuns writes the number of runs of equal items, then each run.
func appendRuns(b []byte, n int, same func(i, j int) bool, put func(b []byte, i, run int) []byte) []byte {
	runs := 0
	for i := 0; i < n; i++ {
		if i == 0 || !same(i, i-1) {
			runs++
		}
	}
	b = binary.AppendUvarint(b, uint64(runs))
	for i := 0; i < n; {
		j := i + 1
		for j < n && same(j, i) {
			j++
		}
		b = put(b, i, j-i)
		i = j
	}
	return b
}

// chunkHeader reads the count and first time of a chunk without checking
// or decoding the rest: enough to tell whether a time can be in it.
func chunkHeader(v []byte) (n int, first int64, ok bool) {
	if len(v) < 1+crcLen || v[0] != codecChunk {
		return 0, 0, false
	}
	d := decoder{b: v[1:]}
	n = int(d.uvarint("n"))
	first = d.varint("first")
	return n, first, d.err == nil
}

// decodeChunk checks and decodes a chunk. Tags are returned for Verify;
// a reading whose tag does not match is the one that was changed.
func decodeChunk(counter string, key, v []byte) ([]chunkReading, []byte, error) {
	fail := func(err error) ([]chunkReading, []byte, error) {
		return nil, nil, fmt.Errorf("%w: chunk of counter %q ending %s: %v", ErrCorrupt, counter, keyString(key), err)
	}
	last, ok := keyNanos(key)
	if !ok {
		return fail(fmt.Errorf("key is not an 8-byte time"))
	}
	if len(v) < 1+crcLen || v[0] != codecChunk {
		return fail(fmt.Errorf("not a chunk value"))
	}
	body, tail := v[:len(v)-crcLen], v[len(v)-crcLen:]
	sumOK := crc32.Update(crc32.Checksum(key, crcTable), crcTable, body) == binary.LittleEndian.Uint32(tail)
	rs, tags, err := decodeChunkBody(body[1:], last)
	if err != nil {
		return fail(err)
	}
	if !sumOK {
		return rs, tags, fmt.Errorf("%w: chunk of counter %q ending %s: checksum mismatch: the chunk was changed after it was written", ErrCorrupt, counter, keyString(key))
	}
	return rs, tags, nil
}

func decodeChunkBody(body []byte, last int64) ([]chunkReading, []byte, error) {
	d := decoder{b: body}
	n := d.uvarint("n")
	if d.err != nil {
		return nil, nil, d.err
	}
	if n == 0 || n > maxChunkReadings {
		return nil, nil, fmt.Errorf("%d readings, want 1 to %d", n, maxChunkReadings)
	}
	rs := make([]chunkReading, n)
	rs[0].ns = d.varint("first time")
	runs := d.uvarint("time runs")
	i, delta := 1, int64(0)
	for r := uint64(0); r < runs && d.err == nil; r++ {
		dod, run := d.varint("time"), d.uvarint("time run")
		if run == 0 || run > uint64(len(rs)-i) {
			d.fail("time run %d of %d readings left", run, len(rs)-i)
			break
		}
		for range run {
			delta += dod
			rs[i].ns = rs[i-1].ns + delta
			if delta <= 0 || rs[i].ns <= rs[i-1].ns {
				d.fail("reading %d: time does not increase", i)
				break
			}
			i++
		}
	}
	if d.err == nil && (i != len(rs) || rs[len(rs)-1].ns != last || rs[0].ns < 0) {
		d.fail("times do not end at the chunk's key")
	}
	runs = d.uvarint("shape runs")
	i = 0
	for r := uint64(0); r < runs && d.err == nil; r++ {
		run := d.uvarint("shape run")
		shape := []byte(d.str("shape", 1<<16))
		if run == 0 || run > uint64(len(rs)-i) {
			d.fail("shape run %d of %d readings left", run, len(rs)-i)
			break
		}
		nch, sl, err := shapeChannels(shape)
		if err == nil && sl != len(shape) {
			err = fmt.Errorf("%d bytes after the shape", len(shape)-sl)
		}
		if err != nil {
			d.fail("shape of reading %d: %v", i, err)
			break
		}
		if uint64(nch)*run > maxChunkReadings*maxChannels {
			d.fail("shape run of %d readings × %d channels", run, nch)
			break
		}
		backing := make([]uint64, nch*int(run)) // one allocation per run
		for k := range int(run) {
			rs[i].shape = shape
			rs[i].counts = backing[k*nch : (k+1)*nch : (k+1)*nch]
			i++
		}
	}
	if d.err == nil && i != len(rs) {
		d.fail("shapes cover %d of %d readings", i, len(rs))
	}
	var prev []uint64
	for k := 0; k < len(rs) && d.err == nil; k++ {
		for j := range rs[k].counts {
			var p uint64
			if j < len(prev) {
				p = prev[j]
			}
			rs[k].counts[j] = p + uint64(d.varint("count"))
		}
		prev = rs[k].counts
	}
	if d.err == nil && len(d.b) != len(rs) {
		d.fail("%d tag bytes for %d readings", len(d.b), len(rs))
	}
	if d.err != nil {
		return nil, nil, d.err
	}
	return rs, d.b, nil
}

// chunkTimes decodes only the times of a chunk (Verify counts readings
// without their values); nil when they do not decode.
func chunkTimes(key, v []byte) []int64 {
	last, ok := keyNanos(key)
	if !ok || len(v) < 1+crcLen || v[0] != codecChunk {
		return nil
	}
	d := decoder{b: v[1 : len(v)-crcLen]}
	n := d.uvarint("n")
	if d.err != nil || n == 0 || n > maxChunkReadings {
		return nil
	}
	out := make([]int64, 1, n)
	out[0] = d.varint("first time")
	runs := d.uvarint("time runs")
	var delta int64
	for r := uint64(0); r < runs && d.err == nil; r++ {
		dod, run := d.varint("time"), d.uvarint("time run")
		if run == 0 || run > n-uint64(len(out)) {
			return nil
		}
		for range run {
			delta += dod
			next := out[len(out)-1] + delta
			if delta <= 0 || next <= out[len(out)-1] {
				return nil
			}
			out = append(out, next)
		}
	}
	if d.err != nil || uint64(len(out)) != n || out[len(out)-1] != last {
		return nil
	}
	return out
}

// toReading turns a chunk reading into a Reading, checking it as the head
// does.
func (c *chunkReading) toReading(counter string) (Reading, error) {
	key := nanosKey(c.ns)
	r, err := decodeReading(counter, key, c.v1Value(key))
	return r, err
}
