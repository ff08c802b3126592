package collector

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// memSink is a real in-memory Sink: it keeps one row per counter+time (per
// sensor+time) and counts the rest as duplicates, as the store does.
type memSink struct {
	mu       sync.Mutex
	readings map[dupKey]Reading
	pressure map[dupKey]Pressure
	order    []dupKey // readings in commit order
	commits  int
	fail     error // when set, every commit fails with it and stores nothing
}

func newMemSink() *memSink {
	return &memSink{readings: map[dupKey]Reading{}, pressure: map[dupKey]Pressure{}}
}

func (m *memSink) CommitReadings(ctx context.Context, rs []Reading) ([]bool, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.fail != nil {
		return nil, m.fail
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	m.commits++
	stored := make([]bool, len(rs))
	for i, r := range rs {
		k := dupKey{r.Counter, r.Time.UnixNano()}
		if _, ok := m.readings[k]; ok {
			continue
		}
		m.readings[k] = r
		m.order = append(m.order, k)
		stored[i] = true
	}
	return stored, nil
}

func (m *memSink) CommitPressure(ctx context.Context, ps []Pressure) ([]bool, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.fail != nil {
		return nil, m.fail
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	m.commits++
	stored := make([]bool, len(ps))
	for i, p := range ps {
		k := dupKey{p.Sensor, p.Time.UnixNano()}
		if _, ok := m.pressure[k]; ok {
			continue
		}
		m.pressure[k] = p
		stored[i] = true
	}
	return stored, nil
}

// stored returns how many readings and DP samples the sink holds.
func (m *memSink) stored() (int, int) {
	m.mu.Lock()
	defer m.mu.Unlock()
	return len(m.readings), len(m.pressure)
}

var errDiskFull = errors.New("disk full")

// testNow is the fixed clock of the tests.
var testNow = time.Date(2026, 3, 2, 10, 1, 0, 0, time.UTC)

// demoCounters and demoSensors follow the invented demo site of the project ("Veldmark Photonics, building C").
func demoCounters() []Counter {
	return []Counter{
		{ID: "pc-hood", Zone: "coating-hood", Sizes: []string{"0.3", "0.5", "5"}, Interval: model.Duration(time.Minute), MaxPerM3: 4e6},
		{ID: "pc-asm-1", Zone: "assembly", Sizes: []string{"0.5", "1", "5"}},
		{ID: "pc-asm-2", Zone: "assembly", Sizes: []string{"0.5um", "1um", "5um"}},
		{ID: "pc-asm-3", Zone: "assembly", Sizes: []string{"0.5", "1", "5"}},
		{ID: "pc-met", Zone: "metrology", FlowLPM: 2.83, Sizes: []string{"0.3", "0.5", "1", "5"}, Mode: ModeDifferential},
		{ID: "pc-gown", Zone: "gowning", Sizes: []string{"0.5", "5"}},
	}
}

func demoSensors() []Sensor {
	return []Sensor{
		{ID: "dp-hood-asm", High: "coating-hood", Low: "assembly", MinPa: 5},
		{ID: "dp-asm-gown", High: "assembly", Low: "gowning", MinPa: 8},
		{ID: "dp-met-asm", High: "metrology", Low: "assembly", MinPa: 5},
		{ID: "dp-gown-corr", High: "gowning", Low: "corridor", MinPa: 8},
	}
}

// demoLimits are the ISO 14644-1:2015 Table 1 limits (particles/m³) of each
// demo counter's zone, as configured: coating-hood ISO 5,
// assembly ISO 7, metrology ISO 6, gowning ISO 8. Blank cells are left out.
func demoLimits() map[string]map[float64]float64 {
	iso5 := map[float64]float64{0.3: 10200, 0.5: 3520, 1: 832}
	iso6 := map[float64]float64{0.3: 102000, 0.5: 35200, 1: 8320, 5: 293}
	iso7 := map[float64]float64{0.5: 352000, 1: 83200, 5: 2930}
	iso8 := map[float64]float64{0.5: 3520000, 1: 832000, 5: 29300}
	return map[string]map[float64]float64{
		"pc-hood": iso5, "pc-asm-1": iso7, "pc-asm-2": iso7, "pc-asm-3": iso7,
		"pc-met": iso6, "pc-gown": iso8,
	}
}

func demoRegistry(t testing.TB) *Registry {
	t.Helper()
	reg, err := NewRegistry(demoCounters(), demoSensors())
	if err != nil {
		t.Fatal(err)
	}
	return reg
}

// newTestIngest is an ingest over the demo registry with the fixed clock
// and a 30-day retention.
func newTestIngest(t testing.TB, sink Sink, opt IngestOptions) *Ingest {
	t.Helper()
	if opt.Now == nil {
		opt.Now = func() time.Time { return testNow }
	}
	if opt.Retention == 0 {
		opt.Retention = 30 * 24 * time.Hour
	}
	return NewIngest(demoRegistry(t), sink, opt)
}

func f64(v float64) *float64 { return &v }
