package daemon

import (
	"testing"
	"time"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
)

// A counter configured without flow_lpm or interval gets the same
// defaults in the ingest path's registry and in the judge's flow check
// and silence rule: 28.3 L/min (1 ft³/min, common practice, no source)
// and one minute.
func TestJudgeCounterDefaults(t *testing.T) {
	cfg, err := site.Load("site.yaml", []byte(`site: "Veldmark Photonics, building C"
zones:
  - {id: assembly, class: 7, area_m2: 10, sizes: ["0.5"], locations: [{id: asm-1}, {id: asm-2}]}
counters:
  - {id: pc-bare, zone: assembly, location: asm-1, sizes: ["0.5"]}
  - {id: pc-set, zone: assembly, location: asm-2, flow_lpm: 50, interval: "2m", sizes: ["0.5"]}
`))
	if err != nil {
		t.Fatal(err)
	}
	reg, err := collector.NewRegistry(cfg.Counters, cfg.PressureSensors)
	if err != nil {
		t.Fatal(err)
	}
	ec := engineConfig(cfg, reg, nil)
	want := map[string]alerts.CounterRule{
		"pc-bare": {NominalFlowLPM: 28.3, Interval: time.Minute, StaleAfter: 3 * time.Minute},
		"pc-set":  {NominalFlowLPM: 50, Interval: 2 * time.Minute, StaleAfter: 6 * time.Minute},
	}
	for _, c := range ec.Counters {
		w := want[c.ID]
		if c.NominalFlowLPM != w.NominalFlowLPM || c.Interval != w.Interval || c.StaleAfter != w.StaleAfter {
			t.Errorf("%s: %+v, want flow %v interval %v silence %v", c.ID, c, w.NominalFlowLPM, w.Interval, w.StaleAfter)
		}
		ci, _ := reg.Counter(c.ID)
		if ci.FlowLPM != c.NominalFlowLPM || time.Duration(ci.Interval) != c.Interval {
			t.Errorf("%s: registry flow %v interval %v, judge %v %v", c.ID, ci.FlowLPM, time.Duration(ci.Interval), c.NominalFlowLPM, c.Interval)
		}
	}
	if len(ec.Counters) != 2 {
		t.Fatalf("%d counters", len(ec.Counters))
	}
	// A bare counter's reading 6 % under the default flow is not trusted.
	bare := ec.Counters[0]
	o := alerts.Observation{Counter: "pc-bare", Time: time.Now(), VolumeL: 26.6, Sizes: []float64{0.5}, PerM3: []float64{1000}}
	if why := bare.Distrust(o, 26.6); why == "" {
		t.Error("a flow of 26.6 L/min against the default 28.3 (−6 %) is trusted")
	}
	// The package defaults agree with one another.
	if alerts.DefaultFlowLPM != collector.DefaultFlowLPM || classify.DefaultFlowLPM != collector.DefaultFlowLPM || alerts.DefaultCounterInterval != collector.DefaultCounterInterval {
		t.Errorf("defaults disagree: alerts %v %v, collector %v %v, classify %v", alerts.DefaultFlowLPM, alerts.DefaultCounterInterval,
			collector.DefaultFlowLPM, collector.DefaultCounterInterval, classify.DefaultFlowLPM)
	}
}
