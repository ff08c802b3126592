package alerts

import (
	"math"
	"sort"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// Results of an ingested reading, the result label of
// cleanmon_readings_total.
const (
	IngestAccepted  = "accepted"
	IngestDuplicate = "duplicate"
	IngestRejected  = "rejected"
	// IngestConflict is a reading with the time of a stored one but other
	// values: not stored (the first stays), counted apart so it is seen.
	IngestConflict = "conflict"
)

// UnknownLabel stands for a label value outside the configuration (a
// counter id nobody configured), so a sender cannot grow the series.
const UnknownLabel = "unknown"

// IngestResults are every result of cleanmon_readings_total; each
// configured counter starts with a zero series of each.
var IngestResults = []string{IngestAccepted, IngestDuplicate, IngestRejected, IngestConflict}

var (
	descReadings = prometheus.NewDesc("cleanmon_readings_total",
		"Particle-counter readings received, by counter and result: accepted (stored), duplicate (already stored, same values), conflict (a stored reading's time with other values: not stored), rejected (bad input: nothing stored). Counters outside the configuration count under counter=\"unknown\".",
		[]string{"counter", "result"}, nil)
	descCounterTime = prometheus.NewDesc("cleanmon_instrument_last_reading_timestamp_seconds",
		"Unix time of the newest accepted reading of a particle counter.",
		[]string{"counter"}, nil)
	descCounterFlow = prometheus.NewDesc("cleanmon_instrument_flow_liters_per_minute",
		"Sample flow (L/min) a counter reported with its newest reading that gave one.",
		[]string{"counter"}, nil)
)

// IngestMetrics counts what the ingest path does. It is safe for
// concurrent use and is itself the collector to register.
type IngestMetrics struct {
	mu       sync.Mutex
	known    map[string]bool
	counts   map[[2]string]uint64
	lastTime map[string]time.Time
	flow     map[string]float64
}

// NewIngestMetrics returns ingest metrics for the configured counter ids;
// every counter starts with zero counts of each result.
func NewIngestMetrics(counters []string) *IngestMetrics {
	m := &IngestMetrics{
		known:    map[string]bool{},
		counts:   map[[2]string]uint64{},
		lastTime: map[string]time.Time{},
		flow:     map[string]float64{},
	}
	for _, c := range counters {
		m.known[c] = true
		for _, r := range IngestResults {
			m.counts[[2]string{c, r}] = 0
		}
	}
	return m
}

func (m *IngestMetrics) label(counter string) string {
	if m.known[counter] {
		return counter
	}
	return UnknownLabel
}

// Count adds n readings of counter with result (one of IngestResults;
// anything else counts as UnknownLabel). n ≤ 0 changes nothing.
func (m *IngestMetrics) Count(counter, result string, n int) {
	if n <= 0 {
		return
	}
	switch result {
	case IngestAccepted, IngestDuplicate, IngestRejected, IngestConflict:
	default:
		result = UnknownLabel
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	m.counts[[2]string{m.label(counter), result}] += uint64(n)
}

// Observe notes an accepted reading of counter taken at t with the flow
// it reported (L/min; NaN or ≤ 0 when it reported none). A reading older
// than the newest seen, a backfill, moves neither the time nor the flow.
// Readings of unconfigured counters are not observed: they would all
// share one series.
func (m *IngestMetrics) Observe(counter string, t time.Time, flowLPM float64) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if !m.known[counter] {
		return
	}
	if t.Before(m.lastTime[counter]) {
		return
	}
	m.lastTime[counter] = t
	if flowLPM > 0 && !math.IsInf(flowLPM, 0) {
		m.flow[counter] = flowLPM
	}
}

// Describe sends the descriptors of the ingest metrics.
func (m *IngestMetrics) Describe(ch chan<- *prometheus.Desc) {
	ch <- descReadings
	ch <- descCounterTime
	ch <- descCounterFlow
}

// Collect emits the ingest metrics.
func (m *IngestMetrics) Collect(ch chan<- prometheus.Metric) {
	m.mu.Lock()
	defer m.mu.Unlock()
	keys := make([][2]string, 0, len(m.counts))
	for k := range m.counts {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(i, j int) bool {
		if keys[i][0] != keys[j][0] {
			return keys[i][0] < keys[j][0]
		}
		return keys[i][1] < keys[j][1]
	})
	for _, k := range keys {
		ch <- prometheus.MustNewConstMetric(descReadings, prometheus.CounterValue, float64(m.counts[k]), k[0], k[1])
	}
	for c, t := range m.lastTime {
		ch <- prometheus.MustNewConstMetric(descCounterTime, prometheus.GaugeValue, unixSeconds(t), c)
	}
	for c, f := range m.flow {
		ch <- prometheus.MustNewConstMetric(descCounterFlow, prometheus.GaugeValue, f, c)
	}
}
