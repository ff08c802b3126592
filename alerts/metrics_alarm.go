package alerts

import (
	"sort"

	"github.com/prometheus/client_golang/prometheus"
)

// AlarmLister is what the alarm collector reads: the engine's alarms
// (all false: the ones not cleared).
type AlarmLister interface{ Alarms(all bool) []Alarm }

// alarmKinds are every kind, so that each configured zone has a zero
// series per kind and level before its first alarm.
var alarmKinds = []string{KindExcursion, KindConsecutive, KindOutOfClass, KindPressureLow, KindPressureReversal, KindStale, KindInstrument, KindTrend, KindEnvironment}

var descAlarmActive = prometheus.NewDesc("cleanmon_alarm_active",
	"Number of alarms firing (active or acknowledged, not yet cleared) per zone, kind and level; delayed alarms, whose delay still runs, are not counted.",
	[]string{"zone", "kind", "level"}, nil)

// AlarmCollector counts the firing alarms.
type AlarmCollector struct {
	src   AlarmLister
	zones []string
}

// NewAlarmCollector returns a collector over src that emits a series for
// every zone in zones (the configured ones) by kind and level, zero when
// none fires, and one for any other zone an alarm names.
func NewAlarmCollector(src AlarmLister, zones []string) *AlarmCollector {
	return &AlarmCollector{src: src, zones: append([]string(nil), zones...)}
}

// Describe sends the descriptor of cleanmon_alarm_active.
func (c *AlarmCollector) Describe(ch chan<- *prometheus.Desc) { ch <- descAlarmActive }

// Collect counts the firing alarms.
func (c *AlarmCollector) Collect(ch chan<- prometheus.Metric) {
	type key struct{ zone, kind, level string }
	counts := map[key]int{}
	for _, z := range c.zones {
		for _, k := range alarmKinds {
			counts[key{z, k, LevelAlert}] = 0
			counts[key{z, k, LevelAction}] = 0
		}
	}
	for _, a := range c.src.Alarms(false) {
		if a.State != StateActive && a.State != StateAcknowledged {
			continue
		}
		counts[key{a.Zone, a.Kind, a.Level}]++
	}
	keys := make([]key, 0, len(counts))
	for k := range counts {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(i, j int) bool {
		a, b := keys[i], keys[j]
		if a.zone != b.zone {
			return a.zone < b.zone
		}
		if a.kind != b.kind {
			return a.kind < b.kind
		}
		return a.level < b.level
	})
	for _, k := range keys {
		ch <- prometheus.MustNewConstMetric(descAlarmActive, prometheus.GaugeValue, float64(counts[k]), k.zone, k.kind, k.level)
	}
}
