package alerts

import "github.com/prometheus/client_golang/prometheus"

var (
	descAttention = prometheus.NewDesc("cleanmon_zone_attention",
		"1 for the zone's attention level, 0 for the others: none (nothing needs a person), alert, unknown (the zone cannot be judged), action, out-of-class; the worst of the particle state, the zone's open alarms, the DP sensors protecting it and its counters.",
		[]string{"zone", "level"}, nil)
	descDoorOpenings = prometheus.NewDesc("cleanmon_door_openings_total",
		"Dips of a DP below its minimum that ended before the alarm delay (a door opened and shut), since the daemon started; counted, not alarmed.",
		[]string{"sensor"}, nil)
)

// JudgeCollector exposes what only the judge knows: each zone's attention
// and each DP sensor's door openings.
type JudgeCollector struct{ j *Judge }

// NewJudgeCollector returns the collector of a judge.
func NewJudgeCollector(j *Judge) *JudgeCollector { return &JudgeCollector{j: j} }

// Describe sends the descriptors of every metric the collector emits.
func (c *JudgeCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- descAttention
	ch <- descDoorOpenings
}

// Collect emits one attention series per zone and level, and the door
// openings of every configured DP sensor.
func (c *JudgeCollector) Collect(ch chan<- prometheus.Metric) {
	for _, z := range c.j.Zones() {
		for _, l := range AttentionLevels {
			ch <- prometheus.MustNewConstMetric(descAttention, prometheus.GaugeValue, boolGauge(z.Attention == l), z.ID, string(l))
		}
	}
	for _, s := range c.j.Sensors() {
		ch <- prometheus.MustNewConstMetric(descDoorOpenings, prometheus.CounterValue, float64(s.DoorOpenings), s.Sensor)
	}
}
