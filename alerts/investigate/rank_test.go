package investigate

import (
	"math/rand/v2"
	"strings"
	"testing"
	"time"
)

var alarmAt = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)

// passageBeforeAlarm puts a 30 s door passage (DP down to 3 Pa) on a
// random boundary sensor in the 8 minutes before the alarm: the unrelated
// event most likely to be blamed instead of the true cause.
func passageBeforeAlarm(rng *rand.Rand, in *Input) {
	p := &in.Pressure[rng.IntN(len(in.Pressure))]
	at := in.AlarmTime.Add(-time.Duration(rng.Float64() * float64(8*time.Minute)))
	for k := range p.Points {
		if t := p.Points[k].Time; !t.Before(at) && t.Before(at.Add(30*time.Second)) {
			p.Points[k].Value = 3
		}
	}
}

// TestRankingOnSimulatedIncidents stages incidents of known cause and
// counts how often the true cause ranks first, as simulated and with a
// door passage added just before the alarm.
func TestRankingOnSimulatedIncidents(t *testing.T) {
	const perCause = 12
	conditions := []struct {
		name string
		edit func(*rand.Rand, *Input)
	}{
		{"as simulated", func(*rand.Rand, *Input) {}},
		{"with a passage before the alarm", passageBeforeAlarm},
	}
	for ci, cond := range conditions {
		t.Run(cond.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(16, uint64(2026+ci)))
			total, first := 0, 0
			for _, cause := range Causes {
				hits := 0
				for i := range perCause {
					inc := SimulateIncident(rng, cause, alarmAt.Add(time.Duration(i)*24*time.Hour))
					cond.edit(rng, &inc.Input)
					res, err := Investigate(inc.Input, Options{})
					if err != nil {
						t.Fatalf("%s #%d: %v", cause, i, err)
					}
					total++
					if len(res.Events) > 0 && res.Events[0].Kind == cause.Kind() {
						hits++
						first++
						continue
					}
					logMiss(t, cause, i, res)
				}
				t.Logf("%-15s true cause first in %d of %d (%.0f %%)", cause, hits, perCause, 100*float64(hits)/perCause)
			}
			t.Logf("all causes: true cause first in %d of %d (%.0f %%)", first, total, 100*float64(first)/float64(total))
			if total < 40 {
				t.Fatalf("only %d incidents, want at least 40", total)
			}
			if float64(first) < 0.8*float64(total) {
				t.Errorf("true cause first in %d of %d incidents, want at least 80 %%", first, total)
			}
		})
	}
}

func logMiss(t *testing.T, cause Cause, i int, res Result) {
	t.Helper()
	t.Logf("%s #%d: true cause not first (rise %s at %s, found %v):", cause, i, clock(res.Rise), res.RiseLocation, res.RiseFound)
	for j, e := range res.Events {
		if j == 4 {
			break
		}
		t.Logf("   %.2f %s z=%.1f w=%.2f p=%.2f: %s", e.Score, e.Kind, e.Deviation, e.Weight, e.Plausible, e.Evidence)
	}
}

// The true cause's evidence names the right sensor or zone.
func TestSimulatedEvidenceNamesTheCause(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	want := map[Cause]string{
		CauseDoorHeldOpen: "dp-asm fell to",
		CauseFanFailure:   "fell together",
		CauseCounterFault: "the other locations stayed flat",
		CauseNeighbour:    "earlier: air from the",
	}
	for _, c := range Causes {
		inc := SimulateIncident(rng, c, alarmAt)
		res, err := Investigate(inc.Input, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Events) == 0 || !strings.Contains(res.Events[0].Evidence, want[c]) {
			t.Errorf("%s: first evidence %q, want it to contain %q", c, firstEvidence(res), want[c])
		}
		if !res.RiseFound || res.Rise.After(inc.Input.AlarmTime) {
			t.Errorf("%s: rise %v (found %v), want found before the alarm", c, res.Rise, res.RiseFound)
		}
	}
}

func firstEvidence(r Result) string {
	if len(r.Events) == 0 {
		return ""
	}
	return r.Events[0].Evidence
}

func BenchmarkInvestigate(b *testing.B) {
	inc := SimulateIncident(rand.New(rand.NewPCG(1, 2)), CauseFanFailure, alarmAt)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Investigate(inc.Input, Options{}); err != nil {
			b.Fatal(err)
		}
	}
}
