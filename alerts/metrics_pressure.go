package alerts

import (
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// SensorDP is the latest differential pressure of one DP sensor, as the
// daemon hands it to the pressure collector.
type SensorDP struct {
	Sensor string
	// High and Low are the areas on either side (zone ids, or an
	// unclassified area such as "corridor").
	High, Low string
	// MinPa is the configured minimum DP across the sensor.
	MinPa float64
	// Pa and Time are the latest reading; a zero Time means none yet.
	Pa   float64
	Time time.Time
}

// SensorDPSource lists the configured DP sensors with their latest
// reading.
type SensorDPSource interface{ LatestDP() []SensorDP }

// SensorDPFunc adapts a function to SensorDPSource.
type SensorDPFunc func() []SensorDP

// LatestDP calls f.
func (f SensorDPFunc) LatestDP() []SensorDP { return f() }

var (
	descDP = prometheus.NewDesc("cleanmon_differential_pressure_pascals",
		"Latest differential pressure (Pa) across a sensor, high side minus low side; negative is a flow reversal.",
		[]string{"sensor", "high", "low"}, nil)
	descDPMin = prometheus.NewDesc("cleanmon_differential_pressure_min_pascals",
		"Configured minimum differential pressure (Pa) across a sensor.",
		[]string{"sensor", "high", "low"}, nil)
	descDPTime = prometheus.NewDesc("cleanmon_pressure_last_reading_timestamp_seconds",
		"Unix time of the latest reading of a DP sensor.",
		[]string{"sensor"}, nil)
)

// PressureCollector exposes the latest DP per sensor.
type PressureCollector struct{ src SensorDPSource }

// NewPressureCollector returns a collector over src, which should list
// the configured sensors only.
func NewPressureCollector(src SensorDPSource) *PressureCollector {
	return &PressureCollector{src: src}
}

// Describe sends the descriptors of every metric the collector emits.
func (c *PressureCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- descDP
	ch <- descDPMin
	ch <- descDPTime
}

// Collect emits one series per sensor; a sensor listed twice counts once,
// with its latest reading.
func (c *PressureCollector) Collect(ch chan<- prometheus.Metric) {
	byID := map[string]SensorDP{}
	var order []string
	for _, s := range c.src.LatestDP() {
		prev, seen := byID[s.Sensor]
		if !seen {
			order = append(order, s.Sensor)
		}
		if !seen || s.Time.After(prev.Time) {
			byID[s.Sensor] = s
		}
	}
	for _, id := range order {
		s := byID[id]
		ch <- prometheus.MustNewConstMetric(descDPMin, prometheus.GaugeValue, s.MinPa, s.Sensor, s.High, s.Low)
		if s.Time.IsZero() {
			continue
		}
		ch <- prometheus.MustNewConstMetric(descDP, prometheus.GaugeValue, s.Pa, s.Sensor, s.High, s.Low)
		ch <- prometheus.MustNewConstMetric(descDPTime, prometheus.GaugeValue, unixSeconds(s.Time), s.Sensor)
	}
}

// unixSeconds is t as fractional Unix seconds.
func unixSeconds(t time.Time) float64 { return float64(t.UnixNano()) / 1e9 }
