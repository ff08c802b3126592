package store

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// probe is n samples of a T/RH probe at Veldmark Photonics, building C,
// one a minute from t0: about 21.3 °C and 45.2 %RH, with a little noise,
// reported to 0.01 °C and 0.1 %RH as building-management transmitters
// commonly do (common practice, no source).
func probe(sensor string, n int, seed uint64) []EnvSample {
	rng := rand.New(rand.NewPCG(seed, 7))
	out := make([]EnvSample, n)
	for i := range out {
		out[i] = EnvSample{Sensor: sensor, Time: t0.Add(time.Duration(i) * time.Minute), Has: EnvTemperature | EnvHumidity,
			TemperatureC: math.Round((21.3+rng.NormFloat64()*0.05)*100) / 100,
			HumidityPct:  math.Round((45.2+rng.NormFloat64()*0.3)*10) / 10}
	}
	return out
}

func toChunk(es []EnvSample) []echunkSample {
	out := make([]echunkSample, len(es))
	for i := range es {
		out[i] = fromEnv(&es[i])
	}
	return out
}

// sameEChunk reports the first sample of got that is not want's, time,
// head value (float bits included) and tag; −1 when all are.
func sameEChunk(got []echunkSample, tags []byte, want []echunkSample) int {
	for i := range want {
		if i >= len(got) || i >= len(tags) {
			return i
		}
		k := nanosKey(want[i].ns)
		v := want[i].v1Value(k)
		if got[i].ns != want[i].ns || got[i].has != want[i].has || !bytes.Equal(got[i].v1Value(k), v) || tags[i] != tagOf(v) {
			return i
		}
	}
	if len(got) != len(want) {
		return len(want)
	}
	return -1
}

func TestEnvChunkRoundTrip(t *testing.T) {
	at := func(i int) time.Time { return t0.Add(time.Duration(i) * time.Minute) }
	th := probe("th-c1", 300, 1)
	var decimals, coarse, xor, velocity, mixed []EnvSample
	for i := range 200 {
		decimals = append(decimals, EnvSample{Time: at(i), Has: EnvTemperature, TemperatureC: 21.337 + float64(i%5)/1000})
		coarse = append(coarse, EnvSample{Time: at(i), Has: EnvHumidity, HumidityPct: 45 + float64(i%3)})
		xor = append(xor, EnvSample{Time: at(i), Has: EnvTemperature | EnvHumidity, TemperatureC: 21.3 + float64(i)/3, HumidityPct: 45.2})
		velocity = append(velocity, EnvSample{Time: at(i), Has: EnvVelocity, VelocityMS: 0.45 * float64(i%2)})
		mixed = append(mixed, EnvSample{Time: at(i).Add(time.Duration(i%7) * time.Second), Has: EnvFields(i%7 + 1), TemperatureC: -12.5, HumidityPct: 99.9, VelocityMS: 0.451})
	}
	cases := []struct {
		name   string
		es     []EnvSample
		perMax float64 // bytes per sample the chunk may cost; 0: not checked
	}{
		{"T/RH probe", th, 4},
		{"thousandths", decimals, 3},
		{"whole percent", coarse, 3},
		{"not thousandths: XORed bits", xor, 0},
		{"velocity with zeros", velocity, 3},
		{"Has changing, uneven times", mixed, 0},
		{"one sample", th[:1], 0},
		{"negative zero", []EnvSample{{Time: at(0), Has: EnvTemperature, TemperatureC: 0}, {Time: at(1), Has: EnvTemperature, TemperatureC: math.Copysign(0, -1)}}, 0},
		{"bounds", []EnvSample{{Time: at(0), Has: envAll, TemperatureC: envMinC, HumidityPct: 0, VelocityMS: envMaxVelocity}, {Time: at(1), Has: envAll, TemperatureC: envMaxC, HumidityPct: 100}}, 0},
		{"full chunk", probe("th-c1", maxChunkReadings, 2), 4},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			es := toChunk(c.es)
			key := nanosKey(es[len(es)-1].ns)
			val := encodeEChunk(key, es)
			got, tags, err := decodeEChunk("th-c1", key, val)
			if err != nil {
				t.Fatal(err)
			}
			if i := sameEChunk(got, tags, es); i >= 0 {
				t.Fatalf("sample %d differs", i)
			}
			for i := range got {
				if s := got[i].sample("th-c1"); s.Time.UnixNano() != es[i].ns || math.Float64bits(s.TemperatureC) != math.Float64bits(c.es[i].TemperatureC) && c.es[i].Has&EnvTemperature != 0 {
					t.Fatalf("sample %d: %+v, want %+v", i, s, c.es[i])
				}
			}
			if n, first, ok := chunkHeader(val); !ok || n != len(es) || first != es[0].ns {
				t.Fatalf("chunkHeader %d %d %v", n, first, ok)
			}
			if per := float64(len(val)) / float64(len(es)); c.perMax > 0 && per > c.perMax {
				t.Errorf("%.2f bytes a sample, want at most %.1f", per, c.perMax)
			}
		})
	}
}

// TestEnvChunkRejects: every malformed chunk is ErrCorrupt with nothing
// decoded, checksum intact or not.
func TestEnvChunkRejects(t *testing.T) {
	// Three samples a minute apart, T and RH, then what follows the times.
	build := func(first int64, after ...[]byte) (key, val []byte) {
		b := []byte{codecChunk}
		b = binary.AppendUvarint(b, 3)
		b = binary.AppendVarint(b, first)
		b = binary.AppendUvarint(b, 2)
		b = binary.AppendVarint(b, int64(time.Minute))
		b = binary.AppendUvarint(b, 1)
		b = binary.AppendVarint(b, 0)
		b = binary.AppendUvarint(b, 1)
		for _, a := range after {
			b = append(b, a...)
		}
		key = nanosKey(first + int64(2*time.Minute))
		return key, seal(key, b)
	}
	vi := func(vs ...int64) []byte {
		var b []byte
		for _, v := range vs {
			b = binary.AppendVarint(b, v)
		}
		return b
	}
	has := []byte{1, 3, 3}                           // one run: T and RH, three samples
	temp := append([]byte{1, 100}, vi(213, 0, 1)...) // 21.3, 21.3, 21.4 °C
	hum := append([]byte{1, 100}, vi(452, -1, 0)...) // 45.2, 45.1, 45.1 %RH
	tags := []byte{0, 0, 0}
	ns := t0.UnixNano()
	if key, val := build(ns, has, temp, hum, tags); true {
		es, _, err := decodeEChunk("th", key, val)
		if err != nil || len(es) != 3 || es[2].vals[0] != 21.4 || es[1].vals[1] != 45.1 {
			t.Fatalf("the well-formed chunk: %+v %v", es, err)
		}
	}
	type badChunk struct {
		name, want string
		key, val   []byte
	}
	var bad []badChunk
	add := func(name, want string, first int64, after ...[]byte) {
		k, v := build(first, after...)
		bad = append(bad, badChunk{name, want, k, v})
	}
	add("Has empty", "0x0 is not a set of quantities", ns, []byte{1, 0, 3}, temp, hum, tags)
	add("Has unknown quantity", "0xb is not a set of quantities", ns, []byte{1, 0x0b, 3}, temp, hum, tags)
	add("Has covers two of three", "Has covers 2 of 3 samples", ns, []byte{1, 3, 2}, temp, hum, tags)
	add("Has run beyond the chunk", "Has run of 4 with 3 samples left", ns, []byte{1, 3, 4}, temp, hum, tags)
	add("Has run of zero", "Has run of 0", ns, []byte{2, 3, 0, 3, 3}, temp, hum, tags)
	add("unit zero", "unit 0 is not 1 to 2^53", ns, has, append([]byte{1, 0}, vi(213, 0, 1)...), hum, tags)
	add("unknown form", "TemperatureC: value form 2", ns, has, append([]byte{2, 100}, vi(213, 0, 1)...), hum, tags)
	add("humidity 150 %", "150 % is not a relative humidity", ns, has, temp, append([]byte{1, 100}, vi(1500, 0, 0)...), tags)
	add("temperature −60 °C", "-60 °C is outside", ns, has, append([]byte{1, 100}, vi(-600, 0, 0)...), hum, tags)
	add("delta past 2^53", "sample 0: TemperatureC out of range", ns, has, append([]byte{1, 1}, vi(1<<60, 0, 0)...), hum, tags)
	add("sum past 2^53", "sample 1: TemperatureC out of range", ns, has, append([]byte{1, 1}, vi(1<<53, 1<<53, 0)...), hum, tags)
	add("NaN in XOR form", "NaN % is not a relative humidity", ns, has, temp, append(binary.AppendUvarint([]byte{0}, math.Float64bits(math.NaN())), 0, 0), tags)
	add("a tag missing", "2 tag bytes for 3 samples", ns, has, temp, hum, tags[:2])
	add("a byte too many", "4 tag bytes for 3 samples", ns, has, temp, hum, tags, []byte{0})
	add("ends after Has", "value ends early", ns, has)
	add("time before 1970", "is before 1970", -int64(time.Minute), has, temp, hum, tags)
	key, val := build(ns, has, temp, hum, tags)
	notChunk := append([]byte(nil), val...)
	notChunk[0] = codecV1
	bad = append(bad,
		badChunk{"not a chunk", "times do not decode", key, notChunk},
		badChunk{"key not its last time", "times do not decode", nanosKey(ns), val},
		badChunk{"three bytes", "times do not decode", key, []byte{codecChunk, 1, 0}})
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			es, tags, err := decodeEChunk("th", c.key, c.val)
			if !errors.Is(err, ErrCorrupt) || es != nil || tags != nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("decode: %d samples, %v; want ErrCorrupt (%s) and nothing", len(es), err, c.want)
			}
		})
	}
}

// envInput builds time-ordered, plausible samples from fuzz bytes: sets
// of quantities, steps and values vary; values are whole thousandths,
// arbitrary floats inside the bounds, raw float bits, or −0.
func envInput(data []byte) []echunkSample {
	var out []echunkSample
	ns := int64(1_700_000_000) * int64(time.Second)
	for len(data) >= 4 && len(out) < maxChunkReadings {
		e := echunkSample{has: EnvFields(data[0]%7 + 1)}
		ns += int64(binary.LittleEndian.Uint16(data[1:])) + 1
		e.ns = ns
		mode := data[3]
		data = data[4:]
		for q := range 3 {
			if e.has&(1<<q) == 0 {
				continue
			}
			if len(data) < 8 {
				return out
			}
			x := binary.LittleEndian.Uint64(data)
			data = data[8:]
			switch (mode >> (2 * q)) & 3 {
			case 0:
				e.vals[q] = float64(int64(x%150_001)-50_000) / 1000
			case 1:
				e.vals[q] = float64(x>>11) / (1 << 53) * 100
			case 2:
				e.vals[q] = math.Float64frombits(x)
			case 3:
				e.vals[q] = math.Copysign(0, -1)
			}
		}
		s := e.sample("f")
		if field, _ := checkEnvValues(&s); field == "" {
			out = append(out, e)
		}
	}
	return out
}

func FuzzEnvChunk(f *testing.F) {
	es := toChunk(probe("th-f", 40, 3))
	key := nanosKey(es[len(es)-1].ns)
	f.Add(append(key, encodeEChunk(key, es)...))                                                                        // a real chunk, for the decoder to mutate
	f.Add(bytes.Repeat([]byte{0x02, 0x60, 0xea, 0x00, 0x53, 0x52, 0, 0, 0, 0, 0, 0, 0xb0, 0xb0, 0, 0, 0, 0, 0, 0}, 30)) // T and RH, thousandths
	f.Add(bytes.Repeat([]byte{0x06, 0x01, 0x00, 0x2a, 0x9a, 0x99, 0x99, 0x99, 0x99, 0x99, 0x35, 0x40, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16}, 30))
	f.Add([]byte{0x00, 1, 0, 0x03, 0, 0, 0, 0, 0, 0, 0, 0, 0x00, 1, 0, 0x00, 0, 0, 0, 0, 0, 0, 0, 0}) // −0 then +0
	f.Fuzz(func(t *testing.T, data []byte) {
		// Arbitrary bytes: never a panic; what decodes re-encodes to the same samples.
		if len(data) >= 8 {
			got, tags, err := decodeEChunk("th-f", data[:8], data[8:])
			if err == nil {
				for i := range got {
					got[i].tag, got[i].hasTag = tags[i], true
				}
				again, tags2, err := decodeEChunk("th-f", data[:8], encodeEChunk(data[:8], got))
				if err != nil || sameEChunk(again, tags2, got) >= 0 || !bytes.Equal(tags, tags2) {
					t.Fatalf("a decoded chunk does not re-encode: %v", err)
				}
			} else if !errors.Is(err, ErrCorrupt) {
				t.Fatalf("error %v is not ErrCorrupt", err)
			}
		}
		// Samples built from the bytes: encode then decode is exact.
		ps := envInput(data)
		if len(ps) == 0 {
			return
		}
		key := nanosKey(ps[len(ps)-1].ns)
		got, tags, err := decodeEChunk("th-f", key, encodeEChunk(key, ps))
		if err != nil {
			t.Fatalf("decode: %v", err)
		}
		if i := sameEChunk(got, tags, ps); i >= 0 {
			t.Fatalf("sample %d of %d differs", i, len(ps))
		}
	})
}

func scanEnv(t *testing.T, s *Store, sensor string, from, to time.Time) []EnvSample {
	t.Helper()
	var got []EnvSample
	if err := s.ScanEnvironment(sensor, from, to, func(e EnvSample) error { got = append(got, e); return nil }); err != nil {
		t.Fatalf("ScanEnvironment(%s, %s, %s): %v", sensor, from, to, err)
	}
	return got
}

// TestEnvironmentChunks: environment samples move into chunks like
// pressure samples: every sample comes back once across chunks and head
// whatever the range's edges, duplicates are known in both, the latest is
// found in either, Sweep cuts a chunk, and the file verifies.
func TestEnvironmentChunks(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1})
	ctx := context.Background()
	th := probe("th-c1", 5000, 4)
	av := []EnvSample{{Sensor: "av-c1", Time: t0, Has: EnvVelocity, VelocityMS: 0.45}, {Sensor: "av-c1", Time: t0.Add(time.Second), Has: EnvVelocity, VelocityMS: 0}}
	if _, _, err := s.AppendEnvironment(ctx, append(th[:4000:4000], av...)); err != nil {
		t.Fatal(err)
	}
	if res := compactOK(t, s); res.Readings != 4002 || res.Counters != 2 || res.Chunks != 3 {
		t.Fatalf("compaction %+v, want 4002 samples of 2 sensors in 3 chunks", res)
	}
	if acc, dup, err := s.AppendEnvironment(ctx, th[3990:]); err != nil || acc != 1000 || dup != 10 {
		t.Fatalf("append across the chunk end: %d %d %v", acc, dup, err)
	}
	if acc, dup, err := s.AppendEnvironment(ctx, []EnvSample{th[17], th[2048], av[1]}); err != nil || acc != 0 || dup != 3 {
		t.Fatalf("repeats of chunked samples: %d %d %v", acc, dup, err)
	}
	if got := scanEnv(t, s, "th-c1", time.Time{}, time.Time{}); !reflect.DeepEqual(got, th) {
		t.Fatalf("scan: %d samples of %d", len(got), len(th))
	}
	if got := scanEnv(t, s, "av-c1", time.Time{}, time.Time{}); !reflect.DeepEqual(got, av) {
		t.Fatalf("scan of the velocity probe: %+v", got)
	}
	// Every chunk edge and the head's start, each as from and as to.
	var edges []int
	_ = s.db.View(func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketEChunks).Bucket([]byte("th-c1")).Cursor()
		for k, v := c.First(); k != nil; k, v = c.Next() {
			n, first, _ := chunkHeader(v)
			i := int((first - t0.UnixNano()) / int64(time.Minute))
			edges = append(edges, i, i+n-1, i+n)
		}
		return nil
	})
	if !reflect.DeepEqual(edges, []int{0, 2047, 2048, 2048, 3999, 4000}) {
		t.Fatalf("chunk edges %v", edges)
	}
	for _, i := range edges {
		for _, j := range []int{i - 1, i, i + 1, 4999, 5000} {
			if j <= i {
				continue
			}
			got := scanEnv(t, s, "th-c1", th[i].Time, t0.Add(time.Duration(j)*time.Minute))
			if !reflect.DeepEqual(got, th[i:j]) {
				t.Fatalf("scan [%d, %d): %d samples", i, j, len(got))
			}
			got = scanEnv(t, s, "th-c1", th[i].Time.Add(-time.Nanosecond), t0.Add(time.Duration(j)*time.Minute-time.Nanosecond))
			if !reflect.DeepEqual(got, th[i:j]) {
				t.Fatalf("scan [%d−1 ns, %d−1 ns): %d samples", i, j, len(got))
			}
		}
	}
	if e, ok, err := s.LatestEnvironment("th-c1"); err != nil || !ok || !reflect.DeepEqual(e, th[4999]) {
		t.Fatalf("latest in the head %+v %v %v", e, ok, err)
	}
	compactOK(t, s)
	if e, ok, err := s.LatestEnvironment("th-c1"); err != nil || !ok || !reflect.DeepEqual(e, th[4999]) {
		t.Fatalf("latest chunked %+v %v %v", e, ok, err)
	}
	if e, ok, err := s.LatestEnvironment("av-c1"); err != nil || !ok || !reflect.DeepEqual(e, av[1]) {
		t.Fatalf("latest velocity %+v %v %v", e, ok, err)
	}
	// Hourly rows from chunks: the first hour's mean, summed here.
	var sum float64
	for _, e := range th[:60] {
		sum += e.TemperatureC
	}
	var row EnvRollup
	if err := s.ScanEnvironmentRollups("th-c1", time.Hour, t0, t0.Add(time.Hour), func(r EnvRollup) error { row = r; return nil }); err != nil || row.Samples != 60 || !near(row.Temperature.Mean, sum/60) {
		t.Fatalf("rollup %+v %v", row, err)
	}
	if res, err := s.Sweep(ctx, th[100].Time); err != nil || res.Environment != 102 {
		t.Fatalf("sweep %+v %v, want 100 + 2 samples", res, err)
	}
	if got := scanEnv(t, s, "th-c1", time.Time{}, time.Time{}); !reflect.DeepEqual(got, th[100:]) {
		t.Fatalf("scan after the sweep: %d samples", len(got))
	}
	if _, ok, err := s.LatestEnvironment("av-c1"); err != nil || ok {
		t.Fatalf("swept sensor still has a latest sample: %v %v", ok, err)
	}
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
}

// A failure inside an environment compaction rolls it back whole: every
// sample stays in the head, once.
func TestEnvironmentCompactionRollsBack(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1, keepHead: true})
	th := probe("th-c1", 700, 5)
	if _, _, err := s.AppendEnvironment(context.Background(), th); err != nil {
		t.Fatal(err)
	}
	boom := errors.New("power cut")
	compactHook = func(name string) error {
		if name == "th-c1" {
			return boom
		}
		return nil
	}
	defer func() { compactHook = nil }()
	if _, err := s.Compact(context.Background()); !errors.Is(err, boom) {
		t.Fatalf("Compact: %v, want the injected failure", err)
	}
	compactHook = nil
	_ = s.db.View(func(tx *bolt.Tx) error {
		if n := tx.Bucket(bucketEnvironment).Bucket([]byte("th-c1")).Stats().KeyN; n != 700 {
			t.Errorf("%d head samples after a failed compaction, want 700", n)
		}
		if tx.Bucket(bucketEChunks).Bucket([]byte("th-c1")) != nil {
			t.Error("chunks left by a failed compaction")
		}
		return nil
	})
	if got := scanEnv(t, s, "th-c1", time.Time{}, time.Time{}); !reflect.DeepEqual(got, th) {
		t.Fatalf("scan: %d samples", len(got))
	}
	compactOK(t, s)
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
}

// BenchmarkEnvChunkSize reports what a T/RH probe sampling once a minute
// costs at rest (chunk value and key) against the head (one value each).
func BenchmarkEnvChunkSize(b *testing.B) {
	es := toChunk(probe("th-c1", 14*24*60, 6)) // two weeks
	var size, head int
	for range b.N {
		size, head = 0, 0
		for i := 0; i < len(es); i += maxChunkReadings {
			part := es[i:min(i+maxChunkReadings, len(es))]
			key := nanosKey(part[len(part)-1].ns)
			size += len(key) + len(encodeEChunk(key, part))
		}
		for i := range es {
			key := nanosKey(es[i].ns)
			head += len(key) + len(es[i].v1Value(key))
		}
	}
	b.ReportMetric(float64(size)/float64(len(es)), "bytes/sample")
	b.ReportMetric(float64(head)/float64(len(es)), "head-bytes/sample")
}
