package main

import (
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"
)

// TestIngestRefusesBadRequests posts bad requests to the real daemon over
// a real bbolt store. Each is refused with its status, an error naming the
// field and index, and the store is unchanged: the audit chain, which gets
// an entry with every committed batch, has the same head before and after.
func TestIngestRefusesBadRequests(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	now := time.Now().UTC().Truncate(time.Second)
	at := func(d time.Duration) string { return now.Add(d).Format(time.RFC3339) }
	good := fmt.Sprintf(`{"counter":"pc-hood","time":%q,"volume_l":28.3,"counts":{"0.3":120,"0.5":40,"1":9,"5":1}}`, at(-time.Minute))
	row := func(fields string) string {
		return `{"counter":"pc-hood","time":"` + at(-2*time.Minute) + `","volume_l":28.3,` + fields + `}`
	}
	cases := []struct {
		name, path, ctype, body string
		status                  int
		field                   string
		index                   int
	}{
		{"unknown counter", "readings", "", `{"counter":"pc-nope","time":"` + at(-time.Minute) + `","volume_l":28.3,"counts":{"0.5":1}}`, 400, "counter", 0},
		{"no counter", "readings", "", `{"time":"` + at(-time.Minute) + `","volume_l":28.3,"counts":{"0.5":1}}`, 400, "counter", 0},
		{"no time", "readings", "", `{"counter":"pc-hood","volume_l":28.3,"counts":{"0.3":3,"0.5":2,"1":1,"5":0}}`, 400, "time", 0},
		{"bad time", "readings", "", `{"counter":"pc-hood","time":"yesterday","volume_l":28.3,"counts":{"0.3":3,"0.5":2,"1":1,"5":0}}`, 400, "time", 0},
		{"time in the future", "readings", "", `{"counter":"pc-hood","time":"` + at(10*time.Minute) + `","volume_l":28.3,"counts":{"0.3":3,"0.5":2,"1":1,"5":0}}`, 400, "time", 0},
		{"older than retention", "readings", "", `{"counter":"pc-hood","time":"1990-01-01T00:00:00Z","volume_l":28.3,"counts":{"0.3":3,"0.5":2,"1":1,"5":0}}`, 400, "time", 0},
		{"missing channel", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1}`), 400, "counts", 0},
		{"channel not on the counter", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0,"2":1}`), 400, "counts", 0},
		{"fractional count", "readings", "", row(`"counts":{"0.3":3.5,"0.5":2,"1":1,"5":0}`), 400, "counts", 0},
		{"negative count", "readings", "", row(`"counts":{"0.3":3,"0.5":-2,"1":1,"5":0}`), 400, "counts", 0},
		{"string count", "readings", "", row(`"counts":{"0.3":"3","0.5":2,"1":1,"5":0}`), 400, "counts", 0},
		{"count beyond 2^53", "readings", "", row(`"counts":{"0.3":9007199254740993,"0.5":2,"1":1,"5":0}`), 400, "counts", 0},
		{"cumulative rising with size", "readings", "", row(`"counts":{"0.3":3,"0.5":20,"1":1,"5":0}`), 400, "counts", 0},
		{"zero volume", "readings", "", `{"counter":"pc-hood","time":"` + at(-time.Minute) + `","volume_l":0,"counts":{"0.3":3,"0.5":2,"1":1,"5":0}}`, 400, "volume_l", 0},
		{"no volume", "readings", "", `{"counter":"pc-hood","time":"` + at(-time.Minute) + `","counts":{"0.3":3,"0.5":2,"1":1,"5":0}}`, 400, "volume_l", 0},
		{"volume against flow × time", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0},"flow_lpm":28.3,"sample_s":120`), 400, "volume_l", 0},
		{"negative flow", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0},"flow_lpm":-1`), 400, "flow_lpm", 0},
		{"unknown status", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0},"status":"sleepy"`), 400, "status", 0},
		{"unknown mode", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0},"mode":"sideways"`), 400, "mode", 0},
		{"unknown field", "readings", "", row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0},"operator":"x"`), 400, "operator", 0},
		{"second element bad", "readings", "", `[` + good + `,{"counter":"pc-hood","time":"` + at(-30*time.Second) + `","volume_l":-1,"counts":{"0.3":3,"0.5":2,"1":1,"5":0}}]`, 400, "volume_l", 1},
		{"NDJSON third line bad", "readings", "application/x-ndjson", good + "\n" + row(`"counts":{"0.3":3,"0.5":2,"1":1,"5":0}`) + "\n{\"counter\":\"pc-hood\"}\n", 400, "time", 2},
		{"not JSON", "readings", "", `counter=pc-hood`, 400, "", 0},
		{"trailing garbage", "readings", "", good + ` x`, 400, "", 0},
		{"wrong content type", "readings", "text/csv", good, 415, "", 0},
		{"body too large", "readings", "", `[` + strings.Repeat(good+",", 8<<20/len(good)+1) + good + `]`, 413, "", 0},
		{"unknown sensor", "pressure", "", `{"sensor":"dp-nope","time":"` + at(-time.Minute) + `","pa":12}`, 400, "sensor", 0},
		{"pressure without pa", "pressure", "", `{"sensor":"dp-hood","time":"` + at(-time.Minute) + `"}`, 400, "pa", 0},
		{"pressure pa not a number", "pressure", "", `{"sensor":"dp-hood","time":"` + at(-time.Minute) + `","pa":"high"}`, 400, "pa", 0},
		{"pressure in the future", "pressure", "", `{"sensor":"dp-hood","time":"` + at(time.Hour) + `","pa":12}`, 400, "time", 0},
	}
	head := func() string {
		_, _, b := d.do("GET", "/api/v1/audit/head", secretViewer, "", nil)
		return string(b)
	}
	waitStartSweep(t, func(path string) (int, []byte) {
		code, _, b := d.do("GET", path, secretAdmin, "", nil)
		return code, b
	})
	before := head()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ct := c.ctype
			if ct == "" {
				ct = "application/json"
			}
			code, _, b := d.do("POST", "/api/v1/"+c.path, secretIngest, ct, []byte(c.body))
			if code != c.status {
				t.Fatalf("%d %s, want %d", code, b, c.status)
			}
			var e struct {
				Error string `json:"error"`
				Field string `json:"field"`
				Index *int   `json:"index"`
			}
			if err := json.Unmarshal(b, &e); err != nil || e.Error == "" {
				t.Fatalf("not an error object: %s", b)
			}
			if c.field != "" {
				if !strings.HasPrefix(e.Field, c.field) || e.Index == nil || *e.Index != c.index {
					t.Errorf("field %q index %v, want %q at %d (%s)", e.Field, e.Index, c.field, c.index, e.Error)
				}
			}
			if h := head(); h != before {
				t.Errorf("the store changed: audit head %s → %s", before, h)
			}
		})
	}
	if len(cases) < 25 {
		t.Fatalf("%d cases; the daemon issue asks for at least 25", len(cases))
	}
	// And a good request after all that does change it.
	if code, _, b := d.do("POST", "/api/v1/readings", secretIngest, "application/json", []byte(good)); code != 200 {
		t.Fatalf("good reading: %d %s", code, b)
	}
	if head() == before {
		t.Error("a stored reading left the audit head unchanged: the check above proves nothing")
	}
}

// A reading re-sent with the time of a stored one but other values is
// answered as a duplicate, the stored reading stays, and it
// is counted as a conflict so that someone looks at the instrument.
func TestIngestConflictKeepsTheFirstReading(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	at := time.Now().UTC().Add(-time.Minute).Truncate(time.Second).Format(time.RFC3339)
	first := `{"counter":"pc-hood","time":"` + at + `","volume_l":28.3,"counts":{"0.3":120,"0.5":40,"1":9,"5":1}}`
	other := `{"counter":"pc-hood","time":"` + at + `","volume_l":28.3,"counts":{"0.3":900,"0.5":400,"1":90,"5":9}}`
	for i, body := range []string{first, first, other} {
		code, _, b := d.do("POST", "/api/v1/readings", secretIngest, "application/json", []byte(body))
		want := map[int]string{0: `"accepted":1,"duplicates":0`, 1: `"accepted":0,"duplicates":1`, 2: `"accepted":0,"duplicates":1`}[i]
		if code != 200 || !strings.Contains(string(b), want) {
			t.Fatalf("post %d: %d %s, want %s", i, code, b, want)
		}
	}
	_, _, b := d.do("GET", "/api/v1/zones/hood/readings?location=hood-1", secretViewer, "", nil)
	if strings.Count(string(b), `"counter":"pc-hood"`) != 1 || !strings.Contains(string(b), `"0.5":40`) {
		t.Errorf("the stored reading changed or doubled: %s", b)
	}
	_, _, m := d.do("GET", "/metrics", secretViewer, "", nil)
	for _, want := range []string{`cleanmon_readings_total{counter="pc-hood",result="accepted"} 1`, `cleanmon_readings_total{counter="pc-hood",result="duplicate"} 1`,
		`cleanmon_readings_total{counter="pc-hood",result="conflict"} 1`} {
		if !strings.Contains(string(m), want) {
			t.Errorf("metrics lack %s", want)
		}
	}
	if !strings.Contains(d.stderr.String(), "stored with other values") {
		t.Error("the conflict is not logged")
	}
}
