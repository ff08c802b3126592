package alerts

import (
	"github.com/prometheus/client_golang/prometheus"
)

// NotifierHealthSource is what the notifier collector reads (a
// *Dispatcher).
type NotifierHealthSource interface {
	Health() map[string]NotifierHealth
}

// Results of a delivery attempt, the result label of
// cleanmon_notifications_total.
const (
	NotifyDelivered = "delivered"
	NotifyFailed    = "failed"
	NotifyRejected  = "rejected"
)

var (
	descNotifications = prometheus.NewDesc("cleanmon_notifications_total",
		"Delivery attempts by notifier and result: delivered, failed (to be repeated after a backoff) or rejected (refused by the receiver; also repeated, never dropped).",
		[]string{"notifier", "result"}, nil)
	descNotifyQueue = prometheus.NewDesc("cleanmon_notification_queue",
		"Deliveries waiting in the outbox for a notifier.",
		[]string{"notifier"}, nil)
	descNotifierUp = prometheus.NewDesc("cleanmon_notifier_up",
		"1 when the notifier's last attempt succeeded and it reports no degraded receiver, 0 otherwise.",
		[]string{"notifier"}, nil)
)

// NotifierCollector exposes the dispatcher's view of each notifier.
type NotifierCollector struct{ src NotifierHealthSource }

// NewNotifierCollector returns a collector over src.
func NewNotifierCollector(src NotifierHealthSource) *NotifierCollector {
	return &NotifierCollector{src: src}
}

// Describe sends the descriptors of the notifier metrics.
func (c *NotifierCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- descNotifications
	ch <- descNotifyQueue
	ch <- descNotifierUp
}

// Collect emits one set of series per notifier.
func (c *NotifierCollector) Collect(ch chan<- prometheus.Metric) {
	for name, h := range c.src.Health() {
		for _, r := range []struct {
			result string
			n      uint64
		}{{NotifyDelivered, h.Delivered}, {NotifyFailed, h.Failed}, {NotifyRejected, h.Rejected}} {
			ch <- prometheus.MustNewConstMetric(descNotifications, prometheus.CounterValue, float64(r.n), name, r.result)
		}
		ch <- prometheus.MustNewConstMetric(descNotifyQueue, prometheus.GaugeValue, float64(h.Queue), name)
		ch <- prometheus.MustNewConstMetric(descNotifierUp, prometheus.GaugeValue, boolGauge(h.Up), name)
	}
}
