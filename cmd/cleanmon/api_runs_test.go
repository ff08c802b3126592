package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

type runOut struct {
	ID         string     `json:"id"`
	Zone       string     `json:"zone"`
	Start      time.Time  `json:"start"`
	End        *time.Time `json:"end"`
	Open       bool       `json:"open"`
	RecordedBy string     `json:"recorded_by"`
}

type exposureOut struct {
	Run    runOut `json:"run"`
	Alarms []struct {
		ID        string     `json:"id"`
		Kind      string     `json:"kind"`
		Since     time.Time  `json:"since"`
		Cleared   *time.Time `json:"cleared"`
		Excursion bool       `json:"excursion"`
	} `json:"alarms"`
	Excursions  int                `json:"excursions"`
	TimeByLevel map[string]float64 `json:"time_by_level_s"`
	Peaks       []struct {
		SizeUM   float64   `json:"size_um"`
		Location string    `json:"location"`
		PerM3    float64   `json:"per_m3"`
		Time     time.Time `json:"time"`
	} `json:"peaks"`
	Caution string `json:"caution"`
}

// excursionAlarm posts ten clean minutes at asm-1 with one excursion at
// t0+5m and returns the excursion alarm once the judge has raised it.
func excursionAlarm(t *testing.T, d *testDaemon, t0 time.Time) alarmJSON {
	t.Helper()
	var rs []postedReading
	for i := 0; i <= 10; i++ {
		c05 := uint64(2000 + 37*i) // 70 671 /m³ and a little more
		if i == 5 {
			// 10 000 particles ≥0.5 µm in 28.3 L is 353 357 /m³, above the
			// ISO 7 limit of 352 000 (ISO 14644-1:2015 Table 1).
			c05 = 10000
		}
		rs = append(rs, postedReading{Counter: "pc-asm-1", Time: rfcTime(t0.Add(time.Duration(i) * time.Minute)), VolumeL: 28.3,
			Counts: map[string]uint64{"0.3": c05 * 2, "0.5": c05, "1": c05 / 4, "5": 3}})
	}
	d.post(rs...)
	var found alarmJSON
	waitFor(t, 10*time.Second, "the excursion alarm", func() bool {
		var as []alarmJSON
		d.getJSON("/api/v1/alarms?state=all", &as)
		for _, a := range as {
			if a.Zone == "assembly" && a.Kind == "excursion" && a.Location == "asm-1" {
				found = a
				return true
			}
		}
		return false
	})
	return found
}

type alarmJSON struct {
	ID        string     `json:"id"`
	Zone      string     `json:"zone"`
	Kind      string     `json:"kind"`
	Location  string     `json:"location"`
	State     string     `json:"state"`
	Since     time.Time  `json:"since"`
	ClearedAt *time.Time `json:"cleared_at"`
}

// TestRunsRecordAuditAndRefuse records runs as JSON and CSV, under the
// roles that may, and refuses bad input naming index and field with
// nothing stored.
func TestRunsRecordAuditAndRefuse(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	t0 := time.Now().UTC().Add(-3 * time.Hour).Truncate(time.Minute)
	one := fmt.Sprintf(`{"id":"LOT-A1","zone":"assembly","start":%q,"product":"lens L-40","lot":"A1"}`, rfcTime(t0))
	for _, c := range []struct {
		token string
		want  int
	}{{secretViewer, 403}, {"", 401}, {secretIngest, 200}} {
		if code, _, b := d.do("POST", "/api/v1/runs", c.token, "application/json", []byte(one)); code != c.want {
			t.Fatalf("POST runs with token %q: %d %s, want %d", c.token, code, b, c.want)
		}
	}
	if code, _, b := d.do("POST", "/api/v1/runs", secretOperator, "application/json", []byte(one)); code != http.StatusConflict {
		t.Fatalf("the same run again: %d %s, want 409", code, b)
	}
	// A bad second element refuses the whole array, naming it.
	bad := fmt.Sprintf(`[{"id":"LOT-B1","zone":"assembly","start":%q},{"id":"LOT-B2","zone":"assembly","start":%q,"end":%q}]`,
		rfcTime(t0), rfcTime(t0), rfcTime(t0.Add(-time.Minute)))
	code, _, b := d.do("POST", "/api/v1/runs", secretOperator, "application/json", []byte(bad))
	var e struct {
		Error string `json:"error"`
		Index *int   `json:"index"`
		Field string `json:"field"`
		Line  int    `json:"line"`
	}
	json.Unmarshal(b, &e)
	if code != 400 || e.Index == nil || *e.Index != 1 || e.Field != "end" {
		t.Fatalf("bad array: %d %s, want 400 naming index 1, field end", code, b)
	}
	for _, c := range []struct{ name, body, field string }{
		{"unknown zone", `{"id":"X","zone":"attic","start":"2026-03-02T06:00:00Z"}`, "zone"},
		{"no start", `{"id":"X","zone":"assembly"}`, "start"},
		{"unknown key", `{"id":"X","zone":"assembly","start":"2026-03-02T06:00:00Z","batch":"7"}`, "batch"},
		{"key twice", `{"id":"X","id":"Y","zone":"assembly","start":"2026-03-02T06:00:00Z"}`, "id"},
	} {
		code, _, b := d.do("POST", "/api/v1/runs", secretOperator, "", []byte(c.body))
		e.Field = ""
		json.Unmarshal(b, &e)
		if code != 400 || e.Field != c.field {
			t.Errorf("%s: %d %s, want 400 naming %s", c.name, code, b, c.field)
		}
	}
	// CSV: a bad line names file line and column, and stores nothing.
	csvBad := "id,zone,start,end,product,lot\nLOT-C1,assembly," + rfcTime(t0) + ",,lens,C1\nLOT-C2,assembly,yesterday,,lens,C2\n"
	code, _, b = d.do("POST", "/api/v1/runs", secretOperator, "text/csv", []byte(csvBad))
	json.Unmarshal(b, &e)
	if code != 400 || e.Line != 3 || e.Field != "start" {
		t.Fatalf("bad CSV: %d %s, want 400 naming line 3, column start", code, b)
	}
	var runs []runOut
	d.getJSON("/api/v1/runs?zone=assembly", &runs)
	if len(runs) != 1 || runs[0].ID != "LOT-A1" || runs[0].RecordedBy != "scada" || !runs[0].Open {
		t.Fatalf("after refusals the runs are %+v, want LOT-A1 alone, open, recorded by scada", runs)
	}
	csvGood := "# shift 06:00\nid,zone,start,end,product,lot\nLOT-C1,assembly," + rfcTime(t0) + "," + rfcTime(t0.Add(time.Hour)) + ",lens,C1\n\nLOT-C2,hood," + rfcTime(t0) + ",,coating,C2\n"
	if code, _, b := d.do("POST", "/api/v1/runs", secretOperator, "text/csv; charset=utf-8", []byte(csvGood)); code != 200 {
		t.Fatalf("good CSV: %d %s", code, b)
	}
	// Close the open run; closing it again is refused.
	closeBody := []byte(fmt.Sprintf(`{"end":%q}`, rfcTime(t0.Add(2*time.Hour))))
	if code, _, b := d.do("POST", "/api/v1/runs/LOT-A1/close", secretOperator, "application/json", closeBody); code != 200 {
		t.Fatalf("close: %d %s", code, b)
	}
	if code, _, b := d.do("POST", "/api/v1/runs/LOT-A1/close", secretOperator, "application/json", closeBody); code != 400 {
		t.Fatalf("close again: %d %s, want 400", code, b)
	}
	if code, _, _ := d.do("POST", "/api/v1/runs/NO-SUCH/close", secretOperator, "", nil); code != 404 {
		t.Fatalf("close of an unknown run: %d, want 404", code)
	}
	// The command posts a file the same way, naming the file and line of
	// a refusal.
	t.Setenv("CLEANMON_TOKEN", secretOperator)
	file := filepath.Join(t.TempDir(), "runs.csv")
	os.WriteFile(file, []byte("id,zone,start\nLOT-D1,assembly,"+rfcTime(t0)+"\nLOT-D2,nowhere,"+rfcTime(t0)+"\n"), 0o600)
	var out, errb bytes.Buffer
	if code := run([]string{"runs", "import", "--url", d.url, file}, &out, &errb); code != 2 || !strings.Contains(errb.String(), "runs.csv") || !strings.Contains(errb.String(), "zone") {
		t.Errorf("runs import of a bad file: exit %d, %s", code, errb.String())
	}
	os.WriteFile(file, []byte("id,zone,start\nLOT-D1,assembly,"+rfcTime(t0)+"\n"), 0o600)
	if code := run([]string{"runs", "import", "--url", d.url, file}, &out, &errb); code != 0 {
		t.Errorf("runs import: exit %d, %s", code, errb.String())
	}
	d.getJSON("/api/v1/runs", &runs)
	if len(runs) != 4 {
		t.Fatalf("%d runs, want 4: %+v", len(runs), runs)
	}
	// Every change is in the audit chain, tied to the token that made it.
	var audit []struct{ Actor, Action, Subject string }
	d.getJSON("/api/v1/audit", &audit)
	got := map[string]string{}
	for _, a := range audit {
		if strings.HasPrefix(a.Action, "run-") {
			got[a.Action+" "+strings.SplitN(a.Subject, ":", 2)[0]] = a.Actor
		}
	}
	want := map[string]string{"run-create LOT-A1": "scada", "run-create LOT-C1": "shift-lead", "run-create LOT-C2": "shift-lead", "run-close LOT-A1": "shift-lead",
		"run-create LOT-D1": "shift-lead"}
	for k, v := range want {
		if got[k] != v {
			t.Errorf("audit %s by %q, want %q (all: %v)", k, got[k], v, got)
		}
	}
	if len(got) != len(want) {
		t.Errorf("audit holds %v, want exactly %v", got, want)
	}
}

// TestExposureAtRunAndWindowEdges: a run that ends the second an
// excursion began overlapped it, and its peak includes the reading at its
// end; a run that ended a second earlier did not and does not.
func TestExposureAtRunAndWindowEdges(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	t0 := time.Now().UTC().Add(-30 * time.Minute).Truncate(time.Minute)
	a := excursionAlarm(t, d, t0)
	at := t0.Add(5 * time.Minute)
	if !a.Since.Equal(at) {
		t.Fatalf("alarm since %s, want the excursion's reading %s", a.Since, at)
	}
	runs := []map[string]string{
		{"id": "ends-at-rise", "zone": "assembly", "start": rfcTime(t0), "end": rfcTime(at)},
		{"id": "ends-before", "zone": "assembly", "start": rfcTime(t0), "end": rfcTime(at.Add(-time.Second))},
		{"id": "starts-after-rise", "zone": "assembly", "start": rfcTime(at.Add(time.Second)), "end": rfcTime(t0.Add(10 * time.Minute))},
		{"id": "other-zone", "zone": "hood", "start": rfcTime(t0), "end": rfcTime(t0.Add(10 * time.Minute))},
	}
	b, _ := json.Marshal(runs)
	if code, _, body := d.do("POST", "/api/v1/runs", secretOperator, "application/json", b); code != 200 {
		t.Fatalf("POST runs: %d %s", code, body)
	}
	overlaps := map[string]bool{"ends-at-rise": true, "ends-before": false, "starts-after-rise": true, "other-zone": false}
	for id, want := range overlaps {
		var ex exposureOut
		d.getJSON("/api/v1/runs/"+id+"/exposure", &ex)
		got := false
		for _, x := range ex.Alarms {
			got = got || x.ID == a.ID
		}
		if got != want {
			t.Errorf("run %s lists alarm %s: %v, want %v (%+v)", id, a.ID, got, want, ex.Alarms)
		}
		if want && ex.Excursions < 1 {
			t.Errorf("run %s: %d excursions, want at least 1", id, ex.Excursions)
		}
		if !strings.Contains(ex.Caution, "does not replace") {
			t.Errorf("run %s: exposure without the caution", id)
		}
		// The peak at 0.5 µm: 10 000 in 28.3 L = 353 357 /m³ within the
		// run ending at the excursion's reading; 2 000 + 37·4 = 2 148 in
		// 28.3 L = 75 901 /m³ for the run that ended a second before it.
		wantPeak := map[string]float64{"ends-at-rise": 10000 / 0.0283, "ends-before": 2148 / 0.0283}[id]
		for _, p := range ex.Peaks {
			if p.SizeUM == 0.5 && wantPeak > 0 && (p.PerM3 < wantPeak*0.999 || p.PerM3 > wantPeak*1.001) {
				t.Errorf("run %s: peak ≥0.5 µm %.0f at %s, want %.0f", id, p.PerM3, p.Location, wantPeak)
			}
		}
	}
	// The alarm's side: the runs it overlapped.
	var ar struct {
		Runs []runOut `json:"runs"`
	}
	d.getJSON("/api/v1/alarms/"+a.ID+"/runs", &ar)
	var ids []string
	for _, r := range ar.Runs {
		ids = append(ids, r.ID)
	}
	if strings.Join(ids, ",") != "ends-at-rise,starts-after-rise" {
		t.Errorf("alarm %s overlapped runs %v, want ends-at-rise, starts-after-rise", a.ID, ids)
	}
	// The investigation of the same alarm answers, and names the runs.
	var inv struct {
		Alarm  alarmJSON `json:"alarm"`
		Events []any     `json:"events"`
		Runs   []runOut  `json:"runs"`
		Series []struct {
			Group string `json:"group"`
		} `json:"series"`
	}
	d.getJSON("/api/v1/alarms/"+a.ID+"/investigation?before=20m&after=15m", &inv)
	if inv.Alarm.ID != a.ID || len(inv.Runs) != 2 || len(inv.Series) == 0 {
		t.Errorf("investigation: alarm %s, %d runs, %d series", inv.Alarm.ID, len(inv.Runs), len(inv.Series))
	}
	if code, _, body := d.do("GET", "/api/v1/alarms/"+a.ID+"/investigation?before=2d", secretViewer, "", nil); code != 400 || !bytes.Contains(body, []byte("before")) {
		t.Errorf("before=2d: %d %s, want 400 naming before", code, body)
	}
}
