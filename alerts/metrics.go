package alerts

import (
	"github.com/prometheus/client_golang/prometheus"

	"cleanmon/classify"
)

// The collectors in the metrics*.go files each cover one concern and go on
// a registry the daemon makes (never the global one). Every label value
// comes from the site configuration, so the series stay bounded.

// ZoneViewer is what the zone collector reads: the live zone state.
type ZoneViewer interface{ Zones() []ZoneView }

// zoneStatuses are every zone state, for one cleanmon_zone_state series
// each.
var zoneStatuses = []ZoneStatus{StatusInClass, StatusAlert, StatusAction, StatusOutOfClass, StatusUnknown}

// operatingStates are every operating state of a zone.
var operatingStates = []string{AtRest, InOperation, Maintenance}

var (
	descConcentration = prometheus.NewDesc("cleanmon_particle_concentration_per_cubic_meter",
		"Cumulative particle concentration (particles/m³ at or above size_um) of the latest reading at a sampling location; a reading with fault status is left out.",
		[]string{"zone", "location", "size_um"}, nil)
	descMeanConcentration = prometheus.NewDesc("cleanmon_particle_concentration_mean_per_cubic_meter",
		"Mean cumulative particle concentration (particles/m³) over the zone's rolling window at a sampling location, as the zone state judges it.",
		[]string{"zone", "location", "size_um"}, nil)
	descClassLimit = prometheus.NewDesc("cleanmon_class_limit_per_cubic_meter",
		"ISO 14644-1 class or EU GMP grade limit (particles/m³) in force for the zone at a threshold size; absent where the standard specifies none.",
		[]string{"zone", "size_um"}, nil)
	descAlertLevel = prometheus.NewDesc("cleanmon_alert_level_per_cubic_meter",
		"Alert level (particles/m³, ISO 14644-2 early warning) configured for the zone at a threshold size.",
		[]string{"zone", "size_um"}, nil)
	descActionLevel = prometheus.NewDesc("cleanmon_action_level_per_cubic_meter",
		"Action level (particles/m³, ISO 14644-2) in force for the zone at a threshold size: the configured one, capped at the limit, or the limit itself.",
		[]string{"zone", "size_um"}, nil)
	descInClass = prometheus.NewDesc("cleanmon_zone_in_class",
		"1 when the zone is shown in class, 0 otherwise, including when its state is unknown (fail safe).",
		[]string{"zone"}, nil)
	descZoneState = prometheus.NewDesc("cleanmon_zone_state",
		"1 for the zone's current state (in-class, alert, action, out-of-class, unknown), 0 for the others.",
		[]string{"zone", "state"}, nil)
	descOperatingState = prometheus.NewDesc("cleanmon_zone_operating_state",
		"1 for the zone's current operating state (at-rest, in-operation, maintenance), 0 for the others.",
		[]string{"zone", "state"}, nil)
	descLocationFresh = prometheus.NewDesc("cleanmon_location_fresh",
		"1 when the sampling location has a trusted reading at every zone size within the zone's stale_after, 0 otherwise.",
		[]string{"zone", "location"}, nil)
)

// ZoneCollector exposes the live zone state.
type ZoneCollector struct{ src ZoneViewer }

// NewZoneCollector returns a collector over src (a *ZoneTracker).
func NewZoneCollector(src ZoneViewer) *ZoneCollector { return &ZoneCollector{src: src} }

// Describe sends the descriptors of every metric the collector emits.
func (c *ZoneCollector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{descConcentration, descMeanConcentration, descClassLimit, descAlertLevel, descActionLevel, descInClass, descZoneState, descOperatingState, descLocationFresh} {
		ch <- d
	}
}

// Collect reads the zones once and emits their series.
func (c *ZoneCollector) Collect(ch chan<- prometheus.Metric) {
	gauge := func(d *prometheus.Desc, v float64, labels ...string) {
		ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, v, labels...)
	}
	for _, z := range c.src.Zones() {
		for _, sl := range z.Limits {
			size := classify.FormatSize(sl.SizeUM)
			if sl.Limit != nil {
				gauge(descClassLimit, *sl.Limit, z.ID, size)
			}
			if sl.Alert != nil {
				gauge(descAlertLevel, *sl.Alert, z.ID, size)
			}
			if sl.Action != nil {
				gauge(descActionLevel, *sl.Action, z.ID, size)
			}
		}
		gauge(descInClass, boolGauge(z.State == StatusInClass), z.ID)
		for _, st := range zoneStatuses {
			gauge(descZoneState, boolGauge(z.State == st), z.ID, string(st))
		}
		for _, st := range operatingStates {
			gauge(descOperatingState, boolGauge(z.OperatingState == st), z.ID, st)
		}
		for _, l := range z.Locations {
			gauge(descLocationFresh, boolGauge(l.Fresh), z.ID, l.ID)
			for _, s := range z.Sizes {
				size := classify.FormatSize(s)
				if v, ok := l.PerM3[size]; ok && !l.Time.IsZero() && l.Status != StatusFault {
					gauge(descConcentration, v, z.ID, l.ID, size)
				}
				if v, ok := l.MeanPerM3[size]; ok {
					gauge(descMeanConcentration, v, z.ID, l.ID, size)
				}
			}
		}
	}
}

func boolGauge(b bool) float64 {
	if b {
		return 1
	}
	return 0
}
