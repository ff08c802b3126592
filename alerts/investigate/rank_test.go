package investigate

import (
	"math/rand/v2"
	"testing"
	"time"
)

var alarmAt = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)

// TestRankingOnSimulatedIncidents stages incidents of known cause and
// counts how often the true cause ranks first.
func TestRankingOnSimulatedIncidents(t *testing.T) {
	const perCause = 12
	rng := rand.New(rand.NewPCG(16, 2026))
	total, first := 0, 0
	for _, cause := range Causes {
		hits := 0
		for i := range perCause {
			inc := SimulateIncident(rng, cause, alarmAt.Add(time.Duration(i)*24*time.Hour))
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
			t.Logf("%s #%d: true cause not first (rise %s at %s, found %v):", cause, i, clock(res.Rise), res.RiseLocation, res.RiseFound)
			for j, e := range res.Events {
				if j == 4 {
					break
				}
				t.Logf("   %.2f %s z=%.1f w=%.2f p=%.2f: %s", e.Score, e.Kind, e.Deviation, e.Weight, e.Plausible, e.Evidence)
			}
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
}
