package collector

import (
	"bytes"
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"
)

// benchBody returns n simulated readings of the demo site as NDJSON and as
// a JSON array, and the instant they end.
func benchBody(b *testing.B, n int) (ndjson, array []byte, end time.Time) {
	b.Helper()
	s := newDemoSim(b, SimOptions{Seed: 5, DropoutRate: -1})
	var raws []RawReading
	for batch := range s.Backfill(simStart, simStart.Add(24*time.Hour), time.Hour) {
		raws = append(raws, batch.Readings...)
		if len(raws) >= n {
			break
		}
	}
	raws = raws[:n]
	var nd bytes.Buffer
	enc := json.NewEncoder(&nd)
	for i := range raws {
		if err := enc.Encode(&raws[i]); err != nil {
			b.Fatal(err)
		}
	}
	arr, err := json.Marshal(raws)
	if err != nil {
		b.Fatal(err)
	}
	return nd.Bytes(), arr, simStart.Add(24 * time.Hour)
}

// countSink accepts everything: the benchmarks measure the collector, not
// storage.
type countSink struct{ n int }

func (c *countSink) CommitReadings(_ context.Context, rs []Reading) ([]bool, error) {
	c.n += len(rs)
	return allStored(len(rs)), nil
}

func (c *countSink) CommitPressure(_ context.Context, ps []Pressure) ([]bool, error) {
	c.n += len(ps)
	return allStored(len(ps)), nil
}

// allStored marks n samples all stored.
func allStored(n int) []bool {
	stored := make([]bool, n)
	for i := range stored {
		stored[i] = true
	}
	return stored
}

func benchDecode(b *testing.B, f bodyFormat, pick func(nd, arr []byte) []byte) {
	const n = 1000
	nd, arr, end := benchBody(b, n)
	body := pick(nd, arr)
	in := NewIngest(demoRegistry(b), &countSink{}, IngestOptions{Now: func() time.Time { return end }})
	b.SetBytes(int64(len(body)))
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		v := in.validator()
		rs := make([]Reading, 0, 64)
		got, err := decodeBody(bytes.NewReader(body), f, DefaultMaxBodyBytes+1, func(i int, raw *RawReading) *InputError {
			rs = append(rs, Reading{})
			return v.reading(i, raw, &rs[len(rs)-1])
		})
		if err != nil || got != n || len(rs) != n {
			b.Fatalf("%d readings, %v", got, err)
		}
	}
	b.ReportMetric(float64(n*b.N)/b.Elapsed().Seconds(), "readings/s")
}

// BenchmarkDecodeValidateNDJSON is decode + validate + normalise of one
// 1 000-reading NDJSON body (the ingest fast path, storage excluded).
func BenchmarkDecodeValidateNDJSON(b *testing.B) {
	benchDecode(b, formatNDJSON, func(nd, _ []byte) []byte { return nd })
}

// BenchmarkDecodeValidateArray is the same for a JSON array body.
func BenchmarkDecodeValidateArray(b *testing.B) {
	benchDecode(b, formatJSON, func(_, arr []byte) []byte { return arr })
}

// BenchmarkReadingsLoopback posts 1 000-reading NDJSON bodies to the
// handler over loopback HTTP, with a sink that stores nothing.
func BenchmarkReadingsLoopback(b *testing.B) {
	const n = 1000
	nd, _, end := benchBody(b, n)
	in := NewIngest(demoRegistry(b), &countSink{}, IngestOptions{Now: func() time.Time { return end }})
	srv := httptest.NewServer(http.HandlerFunc(in.Readings))
	defer srv.Close()
	client := srv.Client()
	b.SetBytes(int64(len(nd)))
	b.ResetTimer()
	for b.Loop() {
		resp, err := client.Post(srv.URL, "application/x-ndjson", bytes.NewReader(nd))
		if err != nil {
			b.Fatal(err)
		}
		var res Result
		err = json.NewDecoder(resp.Body).Decode(&res)
		resp.Body.Close()
		if err != nil || resp.StatusCode != 200 || res.Accepted != n {
			b.Fatalf("%d %+v %v", resp.StatusCode, res, err)
		}
	}
	b.ReportMetric(float64(n*b.N)/b.Elapsed().Seconds(), "readings/s")
}
