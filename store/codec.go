package store

import (
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"hash/crc32"
	"math"
	"time"
)

// Value encodings, all little-endian, each value:
//
//	version byte | body | CRC-32C (Castagnoli) of key ‖ version ‖ body
//
// The key is inside the checksum so that a value copied under another key
// is caught as well as a flipped bit. Varints are encoding/binary's.
const (
	codecV1 = 1
	crcLen  = 4

	// reading flags
	flagDifferential = 1 << 0
	flagSizesFloat   = 1 << 1 // sizes as float64 bits, not whole nanometres
	flagFlow         = 1 << 2
	flagSampleTime   = 1 << 3
	readingFlagsAll  = flagDifferential | flagSizesFloat | flagFlow | flagSampleTime

	// maxChannels bounds the size channels of one reading: real counters
	// have 2 to 8 (common practice, no source); this only stops garbage.
	maxChannels = 64
)

var crcTable = crc32.MakeTable(crc32.Castagnoli)

var statusCodes = []string{"", "ok", "warning", "fault"}

func statusCode(s string) (byte, bool) {
	for i, v := range statusCodes {
		if v == s {
			return byte(i), true
		}
	}
	return 0, false
}

// timeKey is the 8-byte big-endian Unix-nanosecond key of t; callers have
// checked that t lies in 1970–2262 (checkTime), so the value is positive
// and byte order equals time order.
func timeKey(t time.Time) []byte { return nanosKey(t.UnixNano()) }

func nanosKey(ns int64) []byte { return binary.BigEndian.AppendUint64(make([]byte, 0, 8), uint64(ns)) }

func keyNanos(k []byte) (int64, bool) {
	if len(k) != 8 {
		return 0, false
	}
	v := binary.BigEndian.Uint64(k)
	if v > math.MaxInt64 {
		return 0, false
	}
	return int64(v), true
}

func keyTime(k []byte) (time.Time, bool) {
	ns, ok := keyNanos(k)
	if !ok {
		return time.Time{}, false
	}
	return time.Unix(0, ns).UTC(), true
}

// keyString names a key in an error message: the time when it is one.
func keyString(k []byte) string {
	if t, ok := keyTime(k); ok {
		return t.Format(time.RFC3339Nano)
	}
	return "key " + hex.EncodeToString(k)
}

func seal(key, v []byte) []byte {
	sum := crc32.Update(crc32.Checksum(key, crcTable), crcTable, v)
	return binary.LittleEndian.AppendUint32(v, sum)
}

// unseal checks version and checksum and returns the body.
func unseal(key, v []byte) ([]byte, error) {
	if len(v) < 1+crcLen {
		return nil, fmt.Errorf("value is %d bytes, too short", len(v))
	}
	if v[0] != codecV1 {
		return nil, fmt.Errorf("unknown encoding version %d", v[0])
	}
	body, tail := v[:len(v)-crcLen], v[len(v)-crcLen:]
	want := binary.LittleEndian.Uint32(tail)
	if got := crc32.Update(crc32.Checksum(key, crcTable), crcTable, body); got != want {
		return nil, fmt.Errorf("checksum mismatch (stored %08x, computed %08x): the value was changed after it was written", want, got)
	}
	return body[1:], nil
}

// sizeNanometres reports whether every size is a whole number of
// nanometres, which encodes in two varint bytes instead of eight.
func sizeNanometres(sizes []float64) bool {
	for _, s := range sizes {
		nm := math.Round(s * 1000)
		if nm/1000 != s || nm > 1<<32 {
			return false
		}
	}
	return true
}

func appendSizes(b []byte, sizes []float64, asFloat bool) []byte {
	b = binary.AppendUvarint(b, uint64(len(sizes)))
	for _, s := range sizes {
		if asFloat {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(s))
		} else {
			b = binary.AppendUvarint(b, uint64(math.Round(s*1000)))
		}
	}
	return b
}

// encodeReading encodes a checked reading; Counter and Time live in the
// bucket name and the key.
func encodeReading(key []byte, r *Reading) []byte {
	asFloat := !sizeNanometres(r.Sizes)
	var flags byte
	if r.Differential {
		flags |= flagDifferential
	}
	if asFloat {
		flags |= flagSizesFloat
	}
	if r.FlowLPM != 0 {
		flags |= flagFlow
	}
	if r.SampleSeconds != 0 {
		flags |= flagSampleTime
	}
	code, _ := statusCode(r.Status)
	b := make([]byte, 0, 40+10*len(r.Sizes))
	b = append(b, codecV1, flags, code)
	b = binary.LittleEndian.AppendUint64(b, math.Float64bits(r.VolumeL))
	if flags&flagFlow != 0 {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(r.FlowLPM))
	}
	if flags&flagSampleTime != 0 {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(r.SampleSeconds))
	}
	b = appendSizes(b, r.Sizes, asFloat)
	for _, c := range r.Counts {
		b = binary.AppendUvarint(b, c)
	}
	return seal(key, b)
}

// decoder reads a value body; the first failure sticks.
type decoder struct {
	b   []byte
	err error
}

func (d *decoder) fail(format string, args ...any) {
	if d.err == nil {
		d.err = fmt.Errorf(format, args...)
	}
}

func (d *decoder) byte1(what string) byte {
	if d.err != nil {
		return 0
	}
	if len(d.b) < 1 {
		d.fail("%s: value ends early", what)
		return 0
	}
	v := d.b[0]
	d.b = d.b[1:]
	return v
}

func (d *decoder) float(what string) float64 {
	if d.err != nil {
		return 0
	}
	if len(d.b) < 8 {
		d.fail("%s: value ends early", what)
		return 0
	}
	v := math.Float64frombits(binary.LittleEndian.Uint64(d.b))
	d.b = d.b[8:]
	return v
}

func (d *decoder) uvarint(what string) uint64 {
	if d.err != nil {
		return 0
	}
	v, n := binary.Uvarint(d.b)
	if n <= 0 || !minimalVarint(d.b[:n]) {
		d.fail("%s: bad varint", what)
		return 0
	}
	d.b = d.b[n:]
	return v
}

// minimalVarint reports whether an encoded varint has no redundant high
// zero byte. The encoder never writes one; refusing it keeps one value one
// byte string, so a value rewritten in another spelling cannot pass as
// the stored one.
func minimalVarint(b []byte) bool { return len(b) == 1 || b[len(b)-1] != 0 }

func (d *decoder) varint(what string) int64 {
	if d.err != nil {
		return 0
	}
	v, n := binary.Varint(d.b)
	if n <= 0 || !minimalVarint(d.b[:n]) {
		d.fail("%s: bad varint", what)
		return 0
	}
	d.b = d.b[n:]
	return v
}

func (d *decoder) str(what string, max int) string {
	n := d.uvarint(what)
	if d.err != nil {
		return ""
	}
	if n > uint64(max) || n > uint64(len(d.b)) {
		d.fail("%s: length %d out of range", what, n)
		return ""
	}
	s := string(d.b[:n])
	d.b = d.b[n:]
	return s
}

func (d *decoder) sizes(asFloat bool) []float64 {
	n := d.uvarint("Sizes")
	if d.err != nil {
		return nil
	}
	if n > maxChannels {
		d.fail("Sizes: %d channels, more than %d", n, maxChannels)
		return nil
	}
	out := make([]float64, n)
	for i := range out {
		if asFloat {
			out[i] = d.float("Sizes")
		} else {
			out[i] = float64(d.uvarint("Sizes")) / 1000
		}
	}
	return out
}

func (d *decoder) end() {
	if d.err == nil && len(d.b) != 0 {
		d.fail("%d unexpected bytes after the value", len(d.b))
	}
}

// openSealed checks a head value against its key (an 8-byte time and the
// CRC over both) and returns the time and the value's body.
func openSealed(key, v []byte) (time.Time, []byte, error) {
	t, ok := keyTime(key)
	if !ok {
		return time.Time{}, nil, errors.New("key is not an 8-byte time")
	}
	body, err := unseal(key, v)
	return t, body, err
}

func decodeReading(counter string, key, v []byte) (Reading, error) {
	fail := func(err error) (Reading, error) {
		return Reading{}, fmt.Errorf("%w: reading of counter %q at %s: %v", ErrCorrupt, counter, keyString(key), err)
	}
	t, body, err := openSealed(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	flags := d.byte1("flags")
	code := d.byte1("Status")
	r := Reading{Counter: counter, Time: t, Differential: flags&flagDifferential != 0}
	r.VolumeL = d.float("VolumeL")
	if flags&flagFlow != 0 {
		r.FlowLPM = d.float("FlowLPM")
	}
	if flags&flagSampleTime != 0 {
		r.SampleSeconds = d.float("SampleSeconds")
	}
	r.Sizes = d.sizes(flags&flagSizesFloat != 0)
	if d.err == nil {
		r.Counts = make([]uint64, len(r.Sizes))
		for i := range r.Counts {
			r.Counts[i] = d.uvarint("Counts")
		}
	}
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if flags&^readingFlagsAll != 0 {
		return fail(fmt.Errorf("unknown flags %#x", flags))
	}
	if int(code) >= len(statusCodes) {
		return fail(fmt.Errorf("Status: unknown code %d", code))
	}
	r.Status = statusCodes[code]
	if field, reason := checkReading(&r); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return r, nil
}

func encodePressure(key []byte, p *Pressure) []byte {
	b := make([]byte, 0, 1+8+crcLen)
	b = append(b, codecV1)
	b = binary.LittleEndian.AppendUint64(b, math.Float64bits(p.Pa))
	return seal(key, b)
}

func decodePressure(sensor string, key, v []byte) (Pressure, error) {
	fail := func(err error) (Pressure, error) {
		return Pressure{}, fmt.Errorf("%w: pressure of sensor %q at %s: %v", ErrCorrupt, sensor, keyString(key), err)
	}
	t, body, err := openSealed(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	p := Pressure{Sensor: sensor, Time: t, Pa: d.float("Pa")}
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if field, reason := checkPressure(&p); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return p, nil
}

func encodeOpState(key []byte, st *OperatingState) []byte {
	b := make([]byte, 0, 16+len(st.State)+len(st.By)+len(st.Reason)+crcLen)
	b = append(b, codecV1)
	b = binary.AppendVarint(b, st.Time.UnixNano())
	for _, s := range []string{st.State, st.By, st.Reason} {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	return seal(key, b)
}

func decodeOpState(zone string, key, v []byte) (OperatingState, error) {
	fail := func(err error) (OperatingState, error) {
		return OperatingState{}, fmt.Errorf("%w: operating state of zone %q, entry %x: %v", ErrCorrupt, zone, key, err)
	}
	if len(key) != 8 {
		return fail(fmt.Errorf("key is not an 8-byte sequence number"))
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	ns := d.varint("Time")
	st := OperatingState{Zone: zone, Time: time.Unix(0, ns).UTC()}
	st.State = d.str("State", maxNameLen)
	st.By = d.str("By", maxNameLen)
	st.Reason = d.str("Reason", maxReasonLen)
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if field, reason := checkOpState(&st); field != "" {
		return fail(fmt.Errorf("%s: %s", field, reason))
	}
	return st, nil
}

func encodeRollup(key []byte, a *rollupAcc) []byte {
	asFloat := !sizeNanometres(a.sizes)
	var flags byte
	if asFloat {
		flags |= flagSizesFloat
	}
	b := make([]byte, 0, 16+28*len(a.sizes))
	b = append(b, codecV1, flags)
	b = binary.AppendUvarint(b, a.samples)
	b = appendSizes(b, a.sizes, asFloat)
	for i := range a.sizes {
		b = binary.AppendUvarint(b, a.n[i])
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(a.sum[i]))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(a.max[i]))
	}
	return seal(key, b)
}

func decodeRollup(counter string, step time.Duration, key, v []byte) (*rollupAcc, error) {
	fail := func(err error) (*rollupAcc, error) {
		return nil, fmt.Errorf("%w: %s rollup of counter %q at %s: %v", ErrCorrupt, step, counter, keyString(key), err)
	}
	start, ok := keyNanos(key)
	if !ok {
		return fail(fmt.Errorf("key is not an 8-byte time"))
	}
	if start%int64(step) != 0 {
		return fail(fmt.Errorf("start is not a multiple of %s", step))
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	d := decoder{b: body}
	flags := d.byte1("flags")
	a := &rollupAcc{start: start}
	a.samples = d.uvarint("Samples")
	a.sizes = d.sizes(flags&flagSizesFloat != 0)
	if d.err == nil {
		a.n = make([]uint64, len(a.sizes))
		a.sum = make([]float64, len(a.sizes))
		a.max = make([]float64, len(a.sizes))
		for i := range a.sizes {
			a.n[i] = d.uvarint("SizeSamples")
			a.sum[i] = d.float("Mean")
			a.max[i] = d.float("Max")
		}
	}
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	if flags&^flagSizesFloat != 0 {
		return fail(fmt.Errorf("unknown flags %#x", flags))
	}
	if reason := a.check(); reason != "" {
		return fail(fmt.Errorf("%s", reason))
	}
	return a, nil
}
