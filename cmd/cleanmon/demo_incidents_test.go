package main

import (
	"fmt"
	"net/url"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/daemon"
)

type demoInvestigation struct {
	Alarm  alarmJSON `json:"alarm"`
	Events []struct {
		Kind     string  `json:"kind"`
		Score    float64 `json:"score"`
		Evidence string  `json:"evidence"`
	} `json:"events"`
}

// startDemoBackfilled starts the demo and waits for its day of history.
func startDemoBackfilled(t *testing.T) *testDaemon {
	t.Helper()
	d := startTestDaemon(t, daemon.Options{Demo: true, DataDir: t.TempDir()})
	waitFor(t, 120*time.Second, "the demo backfill", func() bool { return strings.Contains(d.stderr.String(), "demo backfill done") })
	return d
}

// demoIncidentAlarms returns, for each incident the demo staged in its
// backfilled day, the first alarm of the assembly hall in the incident's
// window that want accepts, with its investigation.
func demoIncidentAlarms(t *testing.T, d *testDaemon, want func(alarmJSON) bool) ([]daemon.DemoIncident, []demoInvestigation) {
	t.Helper()
	now := time.Now()
	incs := daemon.DemoIncidents(now.Add(-23*time.Hour), now.Add(-30*time.Minute))
	var alarms []alarmJSON
	d.getJSON("/api/v1/alarms?state=all&since="+url.QueryEscape(now.Add(-25*time.Hour).UTC().Format(time.RFC3339)), &alarms)
	var invs []demoInvestigation
	var kept []daemon.DemoIncident
	for _, inc := range incs {
		var first *alarmJSON
		for i := range alarms {
			a := &alarms[i]
			if a.Zone == "assembly" && want(*a) && !a.Since.Before(inc.From) && !a.Since.After(inc.To) && (first == nil || a.Since.Before(first.Since)) {
				first = a
			}
		}
		if first == nil {
			t.Logf("incident %s at %s: no alarm of the assembly hall in its window", inc.Cause, inc.Alarm)
			continue
		}
		var inv demoInvestigation
		d.getJSON("/api/v1/alarms/"+first.ID+"/investigation", &inv)
		invs = append(invs, inv)
		kept = append(kept, inc)
	}
	return kept, invs
}

// TestDemoIncidentsRankTheirCauseFirst: on the demo, the first alarm of
// each staged incident, and its first alarm about particles or the
// counter, are investigated through the API, and the true cause must rank
// first in at least 80 % of each.
func TestDemoIncidentsRankTheirCauseFirst(t *testing.T) {
	d := startDemoBackfilled(t)
	any := func(alarmJSON) bool { return true }
	room := func(a alarmJSON) bool {
		return a.Kind != "pressure-low" && a.Kind != "pressure-reversal" && a.Kind != "stale"
	}
	for _, c := range []struct {
		name string
		want func(alarmJSON) bool
	}{{"first alarm", any}, {"first alarm of particles or counter", room}} {
		t.Run(c.name, func(t *testing.T) {
			incs, invs := demoIncidentAlarms(t, d, c.want)
			rankedFirst(t, incs, invs)
		})
	}
}

func rankedFirst(t *testing.T, incs []daemon.DemoIncident, invs []demoInvestigation) {
	if len(invs) < 8 {
		t.Fatalf("only %d staged incidents raised an alarm; want at least 8 of the day's", len(invs))
	}
	first := 0
	for i, inv := range invs {
		got := "(none)"
		if len(inv.Events) > 0 {
			got = inv.Events[0].Kind
		}
		ok := got == string(incs[i].Cause.Kind())
		if ok {
			first++
		}
		t.Logf("%-15s alarm %-12s %-9s first: %-12s %v %s", incs[i].Cause, inv.Alarm.Kind, inv.Alarm.Location, got, ok, firstEvidence(inv))
	}
	share := float64(first) / float64(len(invs))
	t.Logf("true cause ranked first in %d of %d demo incidents (%.0f %%)", first, len(invs), 100*share)
	if share < 0.8 {
		t.Errorf("true cause first in %.0f %% of the demo's incidents, want at least 80 %%", 100*share)
	}
}

func firstEvidence(inv demoInvestigation) string {
	if len(inv.Events) == 0 {
		return ""
	}
	return fmt.Sprintf("(%.2f) %s", inv.Events[0].Score, inv.Events[0].Evidence)
}
