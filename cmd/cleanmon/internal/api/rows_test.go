package api

import (
	"bytes"
	"encoding/json"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// The hand-written row writers must produce what encoding/json would for
// the same object: same keys, same values, valid JSON.
func TestReadingRowMatchesEncodingJSON(t *testing.T) {
	ref := newCounterRef(`pc-"odd"`, "asm-1")
	for _, rd := range []store.Reading{
		{Counter: ref.id, Time: time.Date(2026, 3, 2, 10, 0, 0, 123456789, time.UTC), VolumeL: 28.3, FlowLPM: 28.3, Status: "ok",
			Sizes: []float64{0.3, 0.5, 5}, Counts: []uint64{1200, 310, 2}},
		{Counter: ref.id, Time: time.Date(2026, 3, 2, 10, 1, 0, 0, time.UTC), VolumeL: 2.83, SampleSeconds: 60, Differential: true,
			Sizes: []float64{0.5, 1}, Counts: []uint64{0, 0}},
		{Counter: ref.id, Time: time.Date(2026, 3, 2, 10, 2, 0, 0, time.UTC), VolumeL: 1e-7, Sizes: []float64{0.5}, Counts: []uint64{1 << 52}},
	} {
		var k httpx.SizeKeys
		got := appendReadingRow(nil, &rd, &ref, k.Get(rd.Sizes))
		want := map[string]any{"time": rd.Time, "counter": rd.Counter, "location": "asm-1", "volume_l": rd.VolumeL}
		if rd.FlowLPM != 0 {
			want["flow_lpm"] = rd.FlowLPM
		}
		if rd.SampleSeconds != 0 {
			want["sample_seconds"] = rd.SampleSeconds
		}
		if rd.Status != "" {
			want["status"] = rd.Status
		}
		want["mode"] = map[bool]string{false: "cumulative", true: "differential"}[rd.Differential]
		counts, conc := map[string]any{}, map[string]any{}
		per := rd.PerM3()
		for i, s := range rd.Sizes {
			key := (map[float64]string{0.3: "0.3", 0.5: "0.5", 1: "1", 5: "5"})[s]
			counts[key] = rd.Counts[i]
			conc[key] = per[i]
		}
		want["counts"], want["concentration_per_m3"] = counts, conc
		sameJSON(t, got, want)
	}
}

func TestRollupRowMatchesEncodingJSON(t *testing.T) {
	ref := newCounterRef("pc-asm-1", "asm-1")
	g := &rollupAgg{start: time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC), ref: &ref}
	g.add(&store.Rollup{Samples: 2, Sizes: []float64{0.5, 5}, Mean: []float64{3000, 4.5}, Max: []float64{3500, 9}})
	g.add(&store.Rollup{Samples: 1, Sizes: []float64{0.5}, Mean: []float64{6000}, Max: []float64{6000}})
	got := appendRollupRow(nil, g, "1h")
	// 0.5 µm: (3000×2 + 6000×1)/3 = 4000; 5 µm only from the first: 4.5.
	sameJSON(t, got, map[string]any{"time": g.start, "step": "1h", "counter": "pc-asm-1", "location": "asm-1", "samples": 3,
		"mean_per_m3": map[string]any{"0.5": 4000.0, "5": 4.5}, "max_per_m3": map[string]any{"0.5": 6000.0, "5": 9.0}})
}

func sameJSON(t *testing.T, got []byte, want map[string]any) {
	t.Helper()
	w, err := json.Marshal(want)
	if err != nil {
		t.Fatal(err)
	}
	var a, b any
	if err := json.Unmarshal(got, &a); err != nil {
		t.Fatalf("not JSON: %s: %v", got, err)
	}
	json.Unmarshal(w, &b)
	ga, _ := json.Marshal(a)
	gb, _ := json.Marshal(b)
	if !bytes.Equal(ga, gb) {
		t.Errorf("got  %s\nwant %s", ga, gb)
	}
}

func BenchmarkAppendReadingRow(b *testing.B) {
	ref := newCounterRef("pc-asm-1", "asm-1")
	rd := store.Reading{Counter: ref.id, Time: time.Now(), VolumeL: 28.3, FlowLPM: 28.3, Status: "ok",
		Sizes: []float64{0.3, 0.5, 1, 5}, Counts: []uint64{9000, 3000, 600, 8}}
	var k httpx.SizeKeys
	keys := k.Get(rd.Sizes)
	var buf []byte
	for b.Loop() {
		buf = appendReadingRow(buf[:0], &rd, &ref, keys)
	}
}
