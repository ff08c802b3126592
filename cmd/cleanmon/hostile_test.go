package main

import (
	"context"
	"encoding/json"
	"net/http"
	"strings"
	"testing"
	"time"
)

// hostileCase is one request an attacker or a broken gateway could send.
type hostileCase struct {
	name, method, path, ctype, body string
	status                          int
	field                           string // "" for the element as a whole
	index                           int
}

// hostileCases are the requests of TestHostileRequests; at is a time
// relative to now.
func hostileCases(at func(time.Duration) string) []hostileCase {
	rd := func(fields string) string {
		return `{"counter":"pc-0","time":"` + at(-2*time.Minute) + `","volume_l":28.3,` + fields + `}`
	}
	cnt := `"counts":{"0.5":40,"5":1}`
	good := rd(cnt)
	dp := func(fields string) string {
		return `{"sensor":"dp-asm","time":"` + at(-time.Minute) + `",` + fields + `}`
	}
	const R, P, S, A = "/api/v1/readings", "/api/v1/pressure", "/api/v1/zones/assembly/state", "/api/v1/alarms/assembly:nope/ack"
	big := `[` + strings.Repeat(good+",", 8<<20/len(good)+1) + good + `]`
	return []hostileCase{
		// Readings: form.
		{"unknown counter", "POST", R, "", `{"counter":"pc-nope","time":"` + at(-time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "counter", 0},
		{"no counter", "POST", R, "", `{"time":"` + at(-time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "counter", 0},
		{"no time", "POST", R, "", `{"counter":"pc-0","volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"time in words", "POST", R, "", `{"counter":"pc-0","time":"yesterday","volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"time without zone", "POST", R, "", `{"counter":"pc-0","time":"2026-03-02T10:00:00","volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"time as a number", "POST", R, "", `{"counter":"pc-0","time":1772445600,"volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"time beyond the clock skew", "POST", R, "", `{"counter":"pc-0","time":"` + at(10*time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"time in year 9999", "POST", R, "", `{"counter":"pc-0","time":"9999-12-31T23:59:59Z","volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"time before 2000", "POST", R, "", `{"counter":"pc-0","time":"1990-01-01T00:00:00Z","volume_l":28.3,` + cnt + `}`, 400, "time", 0},
		{"missing channel", "POST", R, "", rd(`"counts":{"0.5":40}`), 400, "counts", 0},
		{"channel not on the counter", "POST", R, "", rd(`"counts":{"0.5":40,"5":1,"1":3}`), 400, "counts", 0},
		{"channel given twice", "POST", R, "", rd(`"counts":{"0.5":40,"0.5":4,"5":1}`), 400, "counts", 0},
		{"fractional count", "POST", R, "", rd(`"counts":{"0.5":40.5,"5":1}`), 400, "counts", 0},
		{"negative count", "POST", R, "", rd(`"counts":{"0.5":-40,"5":1}`), 400, "counts", 0},
		{"count as a string", "POST", R, "", rd(`"counts":{"0.5":"40","5":1}`), 400, "counts", 0},
		{"count beyond 2^53", "POST", R, "", rd(`"counts":{"0.5":9007199254740993,"5":1}`), 400, "counts", 0},
		{"counts as a list", "POST", R, "", rd(`"counts":[40,1]`), 400, "counts", 0},
		{"cumulative rising with size", "POST", R, "", rd(`"counts":{"0.5":1,"5":40}`), 400, "counts", 0},
		{"concentration beyond any counter", "POST", R, "", rd(`"counts":{"0.5":9000000000000,"5":1}`), 400, "counts", 0},
		{"zero volume", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `","volume_l":0,` + cnt + `}`, 400, "volume_l", 0},
		{"no volume", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `",` + cnt + `}`, 400, "volume_l", 0},
		{"volume 1e-300", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `","volume_l":1e-300,` + cnt + `}`, 400, "volume_l", 0},
		{"volume 1e308", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `","volume_l":1e308,` + cnt + `}`, 400, "volume_l", 0},
		{"volume as a string", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `","volume_l":"28.3",` + cnt + `}`, 400, "volume_l", 0},
		{"volume against flow × time", "POST", R, "", rd(cnt + `,"flow_lpm":28.3,"sample_s":120`), 400, "volume_l", 0},
		{"negative flow", "POST", R, "", rd(cnt + `,"flow_lpm":-1`), 400, "flow_lpm", 0},
		{"flow beyond the pump", "POST", R, "", rd(cnt + `,"flow_lpm":1000`), 400, "flow_lpm", 0},
		{"unknown status", "POST", R, "", rd(cnt + `,"status":"sleepy"`), 400, "status", 0},
		{"status with a line feed", "POST", R, "", rd(cnt + `,"status":"ok\nforged"`), 400, "status", 0},
		{"unknown mode", "POST", R, "", rd(cnt + `,"mode":"sideways"`), 400, "mode", 0},
		{"unknown field", "POST", R, "", rd(cnt + `,"operator":"x"`), 400, "operator", 0},
		// Readings: keys an attacker plays with.
		{"counter given twice", "POST", R, "", `{"counter":"pc-0","counter":"pc-1","time":"` + at(-time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "counter", 0},
		{"volume given twice", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `","volume_l":28.3,"volume_l":1e-300,` + cnt + `}`, 400, "volume_l", 0},
		{"counter in capitals", "POST", R, "", `{"COUNTER":"pc-0","time":"` + at(-time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "COUNTER", 0},
		{"volume in mixed case", "POST", R, "", `{"counter":"pc-0","time":"` + at(-time.Minute) + `","Volume_L":28.3,` + cnt + `}`, 400, "Volume_L", 0},
		{"NUL in the counter id", "POST", R, "", `{"counter":"pc-0\u0000","time":"` + at(-time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "counter", 0},
		{"carriage return in the counter id", "POST", R, "", `{"counter":"pc-0\r","time":"` + at(-time.Minute) + `","volume_l":28.3,` + cnt + `}`, 400, "counter", 0},
		// Readings: where in the body.
		{"second element bad", "POST", R, "", `[` + good + `,` + rd(`"counts":{"0.5":-1,"5":1}`) + `]`, 400, "counts", 1},
		{"NDJSON third line bad", "POST", R, "application/x-ndjson", good + "\n" + rd(cnt) + "\n{\"counter\":\"pc-0\"}\n", 400, "time", 2},
		{"not JSON", "POST", R, "", `counter=pc-0`, 400, "", 0},
		{"trailing garbage", "POST", R, "", good + ` x`, 400, "", 0},
		{"empty body", "POST", R, "", ``, 400, "", 0},
		{"null", "POST", R, "", `null`, 400, "", 0},
		{"list of numbers", "POST", R, "", `[1,2]`, 400, "", 0},
		{"truncated object", "POST", R, "", `{"counter":"pc-0","time":`, 400, "", 0},
		{"wrong content type", "POST", R, "text/csv", good, 415, "", 0},
		{"body too large", "POST", R, "", big, 413, "", 0},
		// DP samples.
		{"unknown sensor", "POST", P, "", `{"sensor":"dp-nope","time":"` + at(-time.Minute) + `","pa":12}`, 400, "sensor", 0},
		{"an unknown key instead of pa", "POST", P, "", dp(`"x":1`), 400, "x", 0},
		{"pa missing", "POST", P, "", `{"sensor":"dp-asm","time":"` + at(-time.Minute) + `"}`, 400, "pa", 0},
		{"pa as a word", "POST", P, "", dp(`"pa":"high"`), 400, "pa", 0},
		{"pa 1e300", "POST", P, "", dp(`"pa":1e300`), 400, "pa", 0},
		{"pa beyond -5000", "POST", P, "", dp(`"pa":-6000`), 400, "pa", 0},
		{"pa given twice", "POST", P, "", dp(`"pa":12,"pa":-50`), 400, "pa", 0},
		{"pa in capitals", "POST", P, "", dp(`"PA":12`), 400, "PA", 0},
		{"pa NaN", "POST", P, "", dp(`"pa":NaN`), 400, "pa", 0},
		{"DP time ahead", "POST", P, "", `{"sensor":"dp-asm","time":"` + at(time.Hour) + `","pa":12}`, 400, "time", 0},
		{"NUL in the sensor id", "POST", P, "", `{"sensor":"dp-asm\u0000","time":"` + at(-time.Minute) + `","pa":12}`, 400, "sensor", 0},
		{"DP second element bad", "POST", P, "", `[` + dp(`"pa":12`) + `,` + dp(`"pa":1e300`) + `]`, 400, "pa", 1},
		// Operating state.
		{"state: not JSON", "PUT", S, "", `state=at-rest`, 400, "", 0},
		{"state: a list", "PUT", S, "", `["at-rest"]`, 400, "", 0},
		{"state: empty body", "PUT", S, "", ``, 400, "", 0},
		{"state: unknown field", "PUT", S, "", `{"state":"at-rest","who":"x"}`, 400, "who", 0},
		{"state given twice", "PUT", S, "", `{"state":"at-rest","state":"maintenance"}`, 400, "state", 0},
		{"state in mixed case", "PUT", S, "", `{"State":"at-rest"}`, 400, "State", 0},
		{"state unknown", "PUT", S, "", `{"state":"sleeping"}`, 400, "state", 0},
		{"state a number", "PUT", S, "", `{"state":5}`, 400, "state", 0},
		{"state: NUL in the reason", "PUT", S, "", `{"state":"at-rest","reason":"shift end\u0000"}`, 400, "reason", 0},
		{"state: line feed in the reason", "PUT", S, "", `{"state":"at-rest","reason":"ok\nforged entry"}`, 400, "reason", 0},
		{"state: tab in by", "PUT", S, "", `{"state":"at-rest","by":"j.marsh\tx"}`, 400, "by", 0},
		{"state: body too large", "PUT", S, "", `{"state":"at-rest","reason":"` + strings.Repeat("x", 70<<10) + `"}`, 413, "", 0},
		// Acknowledgement.
		{"ack: not JSON", "POST", A, "", `comment=seen`, 400, "", 0},
		{"ack: empty body", "POST", A, "", ``, 400, "", 0},
		{"ack: a list", "POST", A, "", `[]`, 400, "", 0},
		{"ack: NUL in the comment", "POST", A, "", `{"comment":"seen\u0000"}`, 400, "comment", 0},
		{"ack: line feed in the comment", "POST", A, "", `{"comment":"seen\r\nforged"}`, 400, "comment", 0},
		{"ack: escape in by", "POST", A, "", `{"by":"\u001b[2Jx","comment":"seen"}`, 400, "by", 0},
		{"ack: unknown field", "POST", A, "", `{"comment":"seen","level":"alert"}`, 400, "level", 0},
		{"ack: comment given twice", "POST", A, "", `{"comment":"seen","comment":"not seen"}`, 400, "comment", 0},
		{"ack: comment in mixed case", "POST", A, "", `{"Comment":"seen"}`, 400, "Comment", 0},
		{"ack: comment a number", "POST", A, "", `{"comment":5}`, 400, "comment", 0},
		{"ack: comment too long", "POST", A, "", `{"comment":"` + strings.Repeat("x", 3000) + `"}`, 400, "comment", 0},
	}
}

// goInternals are fragments of Go's own error texts that must never reach
// a client.
var goInternals = []string{"Go value", "main.", "api.", "collector.", "unmarshal", "json:", "jsontext", "reflect", "struct"}

// TestHostileRequests sends hostile requests to the real daemon binary,
// which signs its record. Each is refused with the status it must have,
// an error naming the field and the element index (and the rule for a
// 400), no Go internals, and the store unchanged: the audit chain gets an
// entry with every committed change, so its head must stay the same.
func TestHostileRequests(t *testing.T) {
	priv, _ := auditKeys(t)
	d := startDaemon(t, "--config", trustSite(t, "  signing_key_file: "+priv+"\n", ""), "--data", t.TempDir())
	now := time.Now().UTC().Truncate(time.Second)
	cases := hostileCases(func(d time.Duration) string { return now.Add(d).Format(time.RFC3339) })
	if len(cases) < 60 {
		t.Fatalf("%d cases; at least 60 are wanted", len(cases))
	}
	waitStartSweep(t, func(path string) (int, []byte) {
		code, b, err := apiDo(context.Background(), http.MethodGet, d.url+path, nil, "")
		if err != nil {
			t.Fatal(err)
		}
		return code, b
	})
	before := auditHead(t, d.url)
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ct := c.ctype
			if ct == "" {
				ct = "application/json"
			}
			code, b, err := apiDo(context.Background(), c.method, d.url+c.path, []byte(c.body), ct)
			if err != nil {
				t.Fatalf("no answer the client could read: %v", err)
			}
			if code != c.status {
				t.Fatalf("%d %s, want %d", code, b, c.status)
			}
			var e struct {
				Error string  `json:"error"`
				Field *string `json:"field"`
				Index *int    `json:"index"`
				Rule  string  `json:"rule"`
			}
			if err := json.Unmarshal(b, &e); err != nil || e.Error == "" {
				t.Fatalf("not an error object: %s", b)
			}
			for _, g := range goInternals {
				if strings.Contains(e.Error, g) {
					t.Errorf("the error shows %q: %s", g, e.Error)
				}
			}
			if strings.TrimSpace(e.Error) == "EOF" || strings.HasSuffix(e.Error, ": EOF") {
				t.Errorf("a bare EOF: %s", e.Error)
			}
			if c.status == http.StatusBadRequest {
				if e.Field == nil || e.Index == nil || e.Rule == "" {
					t.Fatalf("field, index or rule missing: %s", b)
				}
				if !strings.HasPrefix(*e.Field, c.field) || (c.field == "" && *e.Field != "") || *e.Index != c.index {
					t.Errorf("field %q index %d, want %q at %d (%s)", *e.Field, *e.Index, c.field, c.index, e.Error)
				}
			}
			if h := auditHead(t, d.url); h != before {
				t.Errorf("the store changed: audit head %s → %s", before, h)
			}
		})
	}
	// A good request after all that does change the head: the check above
	// could fail.
	postReadings(t, d.url, 2)
	if auditHead(t, d.url) == before {
		t.Error("stored readings left the audit head unchanged: the check above proves nothing")
	}
}
