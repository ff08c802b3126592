package main

import (
	"strings"
	"testing"
	"time"
)

// TestInvestigationAndExposurePages opens, in headless Chromium on the
// demo, the investigation of a staged incident's alarm (reached from the
// alarms page) and the exposure of a run that overlapped it: the first
// event is the staged cause, and the run lists the alarm.
func TestInvestigationAndExposurePages(t *testing.T) {
	b := newBrowser(t)
	d := startDemoBackfilled(t)
	incs, invs := demoIncidentAlarms(t, d, func(a alarmJSON) bool {
		return a.Kind == "excursion" || a.Kind == "consecutive" || a.Kind == "instrument"
	})
	if len(invs) == 0 {
		t.Fatal("no staged incident raised an alarm of the assembly hall")
	}
	inc, a := incs[len(incs)-1], invs[len(invs)-1].Alarm

	// The alarms page links every alarm to its investigation.
	b.open(d.url+"/alarms?view=all", `document.body.dataset.ready === "yes"`)
	var links int
	b.eval(`document.querySelectorAll('a.investigate[href$="/investigation"]').length`, &links)
	if links == 0 {
		t.Error("the alarms page has no link to an investigation")
	}

	b.open(d.url+"/alarms/"+a.ID+"/investigation", `document.body.dataset.ready === "yes" && document.querySelector("#inv-events tr[data-rank]") !== null`)
	var first struct{ Kind, Text string }
	b.eval(`(() => { const r = document.querySelector('#inv-events tr[data-rank="1"]'); return {kind: r.dataset.kind, text: r.innerText}; })()`, &first)
	if first.Kind != string(inc.Cause.Kind()) {
		t.Errorf("investigation of %s (staged %s) lists %s first: %s", a.ID, inc.Cause, first.Kind, first.Text)
	}
	var charts int
	b.eval(`document.querySelectorAll("#inv-charts svg.chart").length`, &charts)
	var caution string
	b.eval(`document.getElementById("inv-caution").textContent`, &caution)
	if charts < 3 || !strings.Contains(caution, "does not replace") {
		t.Errorf("investigation page: %d charts, caution %q", charts, caution)
	}
	b.screenshot("investigation")

	// A run the alarm overlapped: its exposure page lists the alarm.
	var ar struct {
		Runs []runOut `json:"runs"`
	}
	d.getJSON("/api/v1/alarms/"+a.ID+"/runs", &ar)
	if len(ar.Runs) == 0 {
		t.Fatalf("alarm %s at %s overlapped none of the demo's runs", a.ID, a.Since)
	}
	run := ar.Runs[0]
	b.open(d.url+"/runs/"+run.ID, `document.body.dataset.ready === "yes"`)
	var listed bool
	b.eval(`[...document.querySelectorAll("#run-alarms tr[data-alarm-id]")].some(r => r.dataset.alarmId === `+jsString(a.ID)+`)`, &listed)
	if !listed {
		var text string
		b.eval(`document.getElementById("run-alarms").innerText`, &text)
		t.Errorf("exposure page of run %s does not list alarm %s:\n%s", run.ID, a.ID, text)
	}
	b.screenshot("exposure")

	// The zone page lists the runs and links to the month.
	b.open(d.url+"/zones/assembly", `document.querySelector("#zone-runs tr[data-run-id]") !== null`)
	b.open(d.url+"/zones/assembly/trend?month="+time.Now().UTC().Format("2006-01"), `document.body.dataset.ready === "yes" && document.querySelector("#trend-locations tr[data-location]") !== null`)
	b.screenshot("trend")
	b.checkConsole()
}

func jsString(s string) string {
	return "'" + strings.NewReplacer(`\`, `\\`, `'`, `\'`).Replace(s) + "'"
}
