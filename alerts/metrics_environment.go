package alerts

import (
	"sort"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// Relative humidity is exported as a ratio (0–1), not in percent: the
// Prometheus naming conventions ask for base units, and a ratio is the
// base unit of a fraction, so that a dashboard formats it as a percentage
// without a factor of 100 hidden in a query. Samples, the API and the
// configuration keep percent, the unit sensors and people use.
var (
	descTemperature = prometheus.NewDesc("cleanmon_temperature_celsius",
		"Latest temperature (°C) of an environment sensor.", []string{"sensor", "zone"}, nil)
	descHumidity = prometheus.NewDesc("cleanmon_relative_humidity_ratio",
		"Latest relative humidity of an environment sensor, as a ratio (0.45 is 45 % RH).", []string{"sensor", "zone"}, nil)
	descVelocity = prometheus.NewDesc("cleanmon_air_velocity_meters_per_second",
		"Latest airflow velocity (m/s) of an environment sensor.", []string{"sensor", "zone"}, nil)
	descEnvTime = prometheus.NewDesc("cleanmon_environment_last_sample_timestamp_seconds",
		"Unix time of the latest sample of an environment sensor.", []string{"sensor", "zone"}, nil)
)

// EnvironmentMetrics keeps the latest value of every channel of every
// environment sensor for /metrics. A sensor with no sample yet exports
// nothing but is not forgotten: its absence is what a rule on
// cleanmon_environment_last_sample_timestamp_seconds sees.
type EnvironmentMetrics struct {
	mu     sync.Mutex
	zone   map[string]string
	latest map[string]EnvironmentObservation
}

// NewEnvironmentMetrics returns the metrics of the sensors given as
// sensor → zone.
func NewEnvironmentMetrics(zones map[string]string) *EnvironmentMetrics {
	return &EnvironmentMetrics{zone: zones, latest: map[string]EnvironmentObservation{}}
}

// Observe takes committed samples; one older than the sensor's latest is
// ignored, as is a sensor not configured.
func (m *EnvironmentMetrics) Observe(es []EnvironmentObservation) {
	m.mu.Lock()
	defer m.mu.Unlock()
	for _, o := range es {
		if _, ok := m.zone[o.Sensor]; !ok {
			continue
		}
		if old, ok := m.latest[o.Sensor]; ok && !o.Time.After(old.Time) {
			continue
		}
		m.latest[o.Sensor] = o
	}
}

// Describe implements prometheus.Collector.
func (m *EnvironmentMetrics) Describe(ch chan<- *prometheus.Desc) {
	ch <- descTemperature
	ch <- descHumidity
	ch <- descVelocity
	ch <- descEnvTime
}

// Collect implements prometheus.Collector.
func (m *EnvironmentMetrics) Collect(ch chan<- prometheus.Metric) {
	m.mu.Lock()
	ids := make([]string, 0, len(m.latest))
	for id := range m.latest {
		ids = append(ids, id)
	}
	sort.Strings(ids)
	obs := make([]EnvironmentObservation, len(ids))
	for i, id := range ids {
		obs[i] = m.latest[id]
	}
	m.mu.Unlock()
	for _, o := range obs {
		zone := m.zone[o.Sensor]
		if v, ok := o.Values[ChanTemperature]; ok {
			ch <- prometheus.MustNewConstMetric(descTemperature, prometheus.GaugeValue, v, o.Sensor, zone)
		}
		if v, ok := o.Values[ChanHumidity]; ok {
			ch <- prometheus.MustNewConstMetric(descHumidity, prometheus.GaugeValue, v/100, o.Sensor, zone)
		}
		if v, ok := o.Values[ChanVelocity]; ok {
			ch <- prometheus.MustNewConstMetric(descVelocity, prometheus.GaugeValue, v, o.Sensor, zone)
		}
		ch <- prometheus.MustNewConstMetric(descEnvTime, prometheus.GaugeValue, float64(o.Time.UnixNano())/float64(time.Second), o.Sensor, zone)
	}
}
