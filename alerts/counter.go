package alerts

import (
	"fmt"
	"math"

	"cleanmon/classify"
)

// DefaultFlowLPM is a counter's nominal sample flow when its configuration
// names none: 1 ft³/min, the flow of most fixed counters (28.3 L/min;
// common practice, no source).
const DefaultFlowLPM = 28.3

// WithDefaults is the counter's rule with every default filled in: the
// nominal flow (DefaultFlowLPM), the sample interval
// (DefaultCounterInterval) and the allowed silence (3 × interval). It is
// the one place these defaults are applied; the flow check and the
// sample-volume plan both read them from here.
func (c CounterRule) WithDefaults() CounterRule {
	if c.NominalFlowLPM == 0 {
		c.NominalFlowLPM = DefaultFlowLPM
	}
	if c.Interval == 0 {
		c.Interval = DefaultCounterInterval
	}
	if c.StaleAfter == 0 {
		c.StaleAfter = 3 * c.Interval
	}
	return c
}

// Distrust says why a reading of this counter cannot be trusted, "" when
// it can: a fault status, no sampled volume, a concentration at or beyond
// the counter's stated maximum (coincidence loss; ISO 21501-4, from
// memory), or a reported flow more than FlowTolerance off the nominal
// (ISO 21501-4: ±5 %, from memory). flowLPM 0 means the counter reported
// no flow. The rule should have its defaults (WithDefaults).
func (c CounterRule) Distrust(o Observation, flowLPM float64) string {
	if why := o.untrustedReason(); why != "" {
		return why
	}
	if c.MaxPerM3 > 0 {
		for j, v := range o.PerM3 {
			if v >= c.MaxPerM3 && j < len(o.Sizes) {
				return fmt.Sprintf("%s /m³ at %s µm is at or beyond the counter's maximum %s /m³", num(v), classify.FormatSize(o.Sizes[j]), num(c.MaxPerM3))
			}
		}
	}
	if c.NominalFlowLPM > 0 && flowLPM > 0 {
		if dev := (flowLPM - c.NominalFlowLPM) / c.NominalFlowLPM; math.Abs(dev) > FlowTolerance {
			return fmt.Sprintf("flow %s L/min is %+.1f %% off the nominal %s L/min (±%g %% allowed)", num(flowLPM), dev*100, num(c.NominalFlowLPM), FlowTolerance*100)
		}
	}
	return ""
}

func (c *counterSpec) distrust(o Observation, flowLPM float64) string {
	return c.CounterRule.Distrust(o, flowLPM)
}
