package alerts

import (
	"strings"
	"testing"
	"time"
)

// thAsm is the demo site's assembly T/RH sensor: 21 ± 1 °C (action) with
// an alert band of ± 0.7 °C, 45 ± 5 % RH, a five-minute delay. The bands
// are the site's own (no standard sets them; common practice, no source).
func thAsm() EnvironmentRule {
	return EnvironmentRule{ID: "th-asm", Zone: "assembly", Delay: 5 * time.Minute, Interval: time.Minute,
		Limits: map[string]EnvironmentLimits{
			ChanTemperature: {Alert: &EnvironmentBand{Low: ptrf(20.3), High: ptrf(21.7)}, Action: &EnvironmentBand{Low: ptrf(20), High: ptrf(22)}},
			ChanHumidity:    {Action: &EnvironmentBand{Low: ptrf(40), High: ptrf(50)}},
		}}
}

func (h *judgeHarness) env(tc, rh float64) {
	h.t.Helper()
	h.observe(Input{Environment: []EnvironmentObservation{{Sensor: "th-asm", Time: h.clk.Now(),
		Values: map[string]float64{ChanTemperature: tc, ChanHumidity: rh}}}})
}

func openOf(jd *Judge, kind string) []Alarm {
	var out []Alarm
	for _, a := range jd.Alarms(false) {
		if a.Kind == kind && a.State != StateDelayed {
			out = append(out, a)
		}
	}
	return out
}

// TestEnvironmentBandDelay: a value outside a band raises nothing until
// it has stayed outside for longer than the delay (by the sensor's own
// clock); an excursion shorter than the delay leaves no alarm; the level
// follows the band crossed (alert, then action), and the zone's attention
// includes the alarm.
func TestEnvironmentBandDelay(t *testing.T) {
	cases := []struct {
		name      string
		tc        []float64 // one sample a minute
		wantLevel string    // "" = no active alarm at the end
		wantEdge  float64
	}{
		{"inside all along", []float64{21, 21.2, 20.8, 21.7, 20.3, 21}, "", 0},
		{"out for 3 minutes, back", []float64{21, 22.5, 22.6, 22.4, 21, 21, 21, 21}, "", 0},
		{"above the alert band for 6 minutes", []float64{21, 21.8, 21.8, 21.9, 21.8, 21.8, 21.9, 21.8}, LevelAlert, 21.7},
		{"above the action band for 6 minutes", []float64{21, 22.3, 22.4, 22.5, 22.4, 22.3, 22.2, 22.6}, LevelAction, 22},
		{"below the action band for 6 minutes", []float64{21, 19.8, 19.7, 19.9, 19.6, 19.9, 19.8, 19.5}, LevelAction, 20},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newJudgeHarness(t, func(cfg *EngineConfig) { cfg.Environment = []EnvironmentRule{thAsm()} })
			h.calm()
			for _, v := range c.tc {
				h.env(v, 45)
				h.clk.Advance(time.Minute)
			}
			got := openOf(h.jd, KindEnvironment)
			if c.wantLevel == "" {
				if len(got) != 0 {
					t.Fatalf("open environment alarms %+v, want none", got)
				}
				if recs := h.j.announced(KindEnvironment); len(recs) != 0 {
					t.Fatalf("%d environment transitions announced for an excursion shorter than the delay", len(recs))
				}
				return
			}
			if len(got) != 1 {
				t.Fatalf("open environment alarms %+v, want one", got)
			}
			a := got[0]
			if a.Level != c.wantLevel || a.Threshold != c.wantEdge || a.Sensor != "th-asm" || a.Unit != "°C" || !strings.Contains(a.Message, "temperature") {
				t.Fatalf("alarm %+v, want level %s at edge %g °C", a, c.wantLevel, c.wantEdge)
			}
			z, _ := h.jd.Zone("assembly")
			if z.Attention.rank() < Attention(c.wantLevel).rank() {
				t.Fatalf("attention %s with an open %s environment alarm", z.Attention, c.wantLevel)
			}
		})
	}
}

// TestEnvironmentClearsAndStale: an alarm whose value comes back inside
// clears (an alert does not latch), and a sensor that falls silent is
// stale after three intervals.
func TestEnvironmentClearsAndStale(t *testing.T) {
	h := newJudgeHarness(t, func(cfg *EngineConfig) {
		cfg.Environment = []EnvironmentRule{thAsm()}
		cfg.Latch = map[string]bool{KindEnvironment: false}
	})
	for range 7 {
		h.env(21, 55) // above 50 % RH
		h.clk.Advance(time.Minute)
	}
	if got := openOf(h.jd, KindEnvironment); len(got) != 1 || got[0].Unit != "%" {
		t.Fatalf("open %+v, want one humidity alarm", got)
	}
	h.env(21, 45)
	if got := openOf(h.jd, KindEnvironment); len(got) != 0 {
		t.Fatalf("open %+v after the value came back, want none", got)
	}
	h.clk.Advance(4 * time.Minute)
	if err := h.jd.Tick(t.Context()); err != nil {
		t.Fatal(err)
	}
	var stale []Alarm
	for _, a := range openOf(h.jd, KindStale) {
		if a.Sensor == "th-asm" {
			stale = append(stale, a)
		}
	}
	if len(stale) != 1 {
		t.Fatalf("stale alarms %+v, want th-asm after 4 minutes of silence", stale)
	}
}

// TestEnvironmentConfigRefused: a rule of an unknown zone or channel is
// refused naming it.
func TestEnvironmentConfigRefused(t *testing.T) {
	cfg := engineConfig()
	r := thAsm()
	r.Zone = "lobby"
	r.Limits["co2_ppm"] = EnvironmentLimits{}
	cfg.Environment = []EnvironmentRule{r}
	_, err := NewEngine(cfg, newMemJournal(), nil)
	if err == nil || !strings.Contains(err.Error(), "environment[0].zone") || !strings.Contains(err.Error(), "environment[0].co2_ppm") {
		t.Fatalf("err %v, want environment[0].zone and environment[0].co2_ppm", err)
	}
}
