package collector

import (
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// Results of a sample, the result label of cleanmon_modbus_samples_total.
const (
	sampleAccepted  = "accepted"  // stored
	sampleDuplicate = "duplicate" // already in the store
	sampleMissed    = "missed"    // finished between two polls and never read
)

// pollMetrics are the poller's Prometheus metrics. The device label takes
// only configured counter and sensor ids, and reason only the Reason
// constants, so the series are bounded by the configuration.
type pollMetrics struct {
	polls   *prometheus.CounterVec
	errs    *prometheus.CounterVec
	last    *prometheus.GaugeVec
	sampled *prometheus.CounterVec
}

// newPollMetrics creates the metrics, every device starting at zero, and
// registers them on r unless it is nil.
func newPollMetrics(r prometheus.Registerer, devices []string) (*pollMetrics, error) {
	m := &pollMetrics{
		polls: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "cleanmon_modbus_polls_total",
			Help: "Modbus polls of a counter or DP sensor, by result (ok, error).",
		}, []string{"device", "result"}),
		errs: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "cleanmon_modbus_poll_errors_total",
			Help: "Failed Modbus polls, by reason (connect, timeout, exception, protocol, restart, implausible, flow-zero, status, rejected, commit).",
		}, []string{"device", "reason"}),
		last: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "cleanmon_modbus_last_success_timestamp_seconds",
			Help: "Unix time of the last Modbus poll of a device that completed without error.",
		}, []string{"device"}),
		sampled: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "cleanmon_modbus_samples_total",
			Help: "Samples seen by the Modbus poller, by result (accepted, duplicate, missed: finished between two polls and never read).",
		}, []string{"device", "result"}),
	}
	for _, d := range devices {
		m.polls.WithLabelValues(d, "ok")
		m.polls.WithLabelValues(d, "error")
		for _, r := range []string{sampleAccepted, sampleDuplicate, sampleMissed} {
			m.sampled.WithLabelValues(d, r)
		}
	}
	if r != nil {
		cs := []prometheus.Collector{m.polls, m.errs, m.last, m.sampled}
		for i, c := range cs {
			if err := r.Register(c); err != nil {
				for _, done := range cs[:i] {
					r.Unregister(done)
				}
				return nil, err
			}
		}
	}
	return m, nil
}

func (m *pollMetrics) polled(device string, ok bool) {
	if ok {
		m.polls.WithLabelValues(device, "ok").Inc()
	} else {
		m.polls.WithLabelValues(device, "error").Inc()
	}
}

func (m *pollMetrics) failed(device, reason string) { m.errs.WithLabelValues(device, reason).Inc() }

func (m *pollMetrics) success(device string, t time.Time) {
	m.last.WithLabelValues(device).Set(float64(t.UnixNano()) / 1e9)
}

func (m *pollMetrics) samples(device, result string, n int) {
	if n > 0 {
		m.sampled.WithLabelValues(device, result).Add(float64(n))
	}
}
