package main

import (
	"encoding/json"
	"net/http"
	"net/url"
	"strings"
	"testing"
	"time"
)

func TestAccessByRole(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	reading := func() []byte {
		// A fresh time each call, so every accepted POST stores a row.
		b, _ := json.Marshal(postedReading{Counter: "pc-hood", Time: rfcTime(time.Now().Add(-time.Minute)), VolumeL: 28.3,
			Counts: map[string]uint64{"0.3": 40, "0.5": 10, "1": 2, "5": 0}})
		return b
	}
	state := []byte(`{"state":"at-rest","by":"j.marsh","reason":"test"}`)
	type route struct {
		name, method, path string
		body               func() []byte
	}
	pressure := func() []byte {
		return []byte(`{"sensor":"dp-hood","time":"` + rfcTime(time.Now().Add(-time.Minute)) + `","pa":12.5}`)
	}
	ack := func() []byte { return []byte(`{"by":"j.marsh","comment":"checked"}`) }
	routes := []route{
		{"healthz", "GET", "/healthz", nil},
		{"readyz", "GET", "/readyz", nil},
		{"read zones", "GET", "/api/v1/zones", nil},
		{"read zone", "GET", "/api/v1/zones/hood", nil},
		{"read readings", "GET", "/api/v1/zones/hood/readings", nil},
		{"read rollups", "GET", "/api/v1/zones/hood/readings?step=1h", nil},
		{"read classification", "GET", "/api/v1/zones/hood/classification", nil},
		{"read levels", "GET", "/api/v1/zones/hood/levels", nil},
		{"read alarms", "GET", "/api/v1/alarms?state=all", nil},
		{"read sensors", "GET", "/api/v1/sensors", nil},
		{"read DP history", "GET", "/api/v1/sensors/dp-hood/pressure", nil},
		{"read audit", "GET", "/api/v1/audit", nil},
		{"read audit head", "GET", "/api/v1/audit/head", nil},
		{"read metrics", "GET", "/metrics", nil},
		{"ingest", "POST", "/api/v1/readings", reading},
		{"ingest DP", "POST", "/api/v1/pressure", pressure},
		{"operate", "PUT", "/api/v1/zones/fill/state", func() []byte { return state }},
		{"acknowledge", "POST", "/api/v1/alarms/no-such-alarm/ack", ack},
		{"backup", "GET", "/api/v1/backup", nil},
	}
	tokens := []struct{ name, secret string }{
		{"none", ""}, {"revoked or unknown", "not-a-configured-secret"},
		{"ingest", secretIngest}, {"viewer", secretViewer}, {"operator", secretOperator}, {"admin", secretAdmin},
	}
	// Expected per route and token, in the order of tokens above (the
	// roles of the access rules): 0 is
	// "let through" — the handler ran and answered on its own terms (a
	// classification of an empty range is 422, an unknown alarm 404).
	const ok = 0
	read := []int{401, 401, 403, ok, ok, ok}
	want := map[string][]int{
		"healthz": {ok, ok, ok, ok, ok, ok}, "readyz": {ok, ok, ok, ok, ok, ok},
		"read zones": read, "read zone": read, "read readings": read, "read rollups": read,
		"read classification": read, "read levels": read, "read alarms": read, "read sensors": read,
		"read DP history": read, "read audit": read, "read audit head": read, "read metrics": read,
		"ingest":      {401, 401, ok, 403, 403, ok},
		"ingest DP":   {401, 401, ok, 403, 403, ok},
		"operate":     {401, 401, 403, 403, ok, ok},
		"acknowledge": {401, 401, 403, 403, ok, ok},
		"backup":      {401, 401, 403, 403, 403, ok},
	}
	if len(want) != len(routes) {
		t.Fatalf("%d routes, %d expectations", len(routes), len(want))
	}
	for _, r := range routes {
		for i, tok := range tokens {
			t.Run(r.name+"/"+tok.name, func(t *testing.T) {
				var body []byte
				ct := ""
				if r.body != nil {
					body, ct = r.body(), "application/json"
				}
				code, h, b := d.do(r.method, r.path, tok.secret, ct, body)
				w := want[r.name][i]
				if (w == ok && (code == 401 || code == 403 || code >= 500)) || (w != ok && code != w) {
					t.Fatalf("%s %s as %s: %d %s, want %d", r.method, r.path, tok.name, code, b, w)
				}
				switch code {
				case http.StatusUnauthorized:
					decodeAPIError(t, b)
					if h.Get("WWW-Authenticate") == "" {
						t.Error("401 without WWW-Authenticate")
					}
				case http.StatusForbidden:
					e := decodeAPIError(t, b)
					if !strings.Contains(e.Error, "role") {
						t.Errorf("403 does not name the role: %s", e.Error)
					}
				}
			})
		}
	}
	// The log names tokens, never their secrets.
	logs := d.stderr.String()
	for _, tok := range tokens[1:] {
		if strings.Contains(logs, tok.secret) {
			t.Errorf("the secret of token %q appears in the log", tok.name)
		}
	}
	if !strings.Contains(logs, "token=shift-lead") {
		t.Error("the log does not name the token of a request (the check above would prove nothing)")
	}
}

func TestAuthorizationHeaderForms(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	cases := []struct {
		header string
		code   int
		msg    string
	}{
		{"", 401, "missing bearer token"},
		{"Bearer " + secretViewer, 200, ""},
		{"bearer " + secretViewer, 200, ""},
		{"Bearer  " + secretViewer + " ", 200, ""},
		{"Basic " + secretViewer, 401, "invalid token"},
		{"Bearer", 401, "invalid token"},
		{"Bearer " + secretViewer + "x", 401, "invalid token"},
		{"Bearer " + tokenHash(secretViewer), 401, "invalid token"}, // the hash itself is no credential
	}
	for _, c := range cases {
		t.Run(c.header, func(t *testing.T) {
			req, _ := http.NewRequest("GET", d.url+"/api/v1/zones", nil)
			if c.header != "" {
				req.Header.Set("Authorization", c.header)
			}
			resp, err := d.client.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			defer resp.Body.Close()
			if resp.StatusCode != c.code {
				t.Fatalf("%d, want %d", resp.StatusCode, c.code)
			}
			if c.msg != "" {
				var e apiErrorBody
				json.NewDecoder(resp.Body).Decode(&e)
				if !strings.Contains(e.Error, c.msg) {
					t.Errorf("error %q lacks %q", e.Error, c.msg)
				}
			}
		})
	}
}

func TestOpenReads(t *testing.T) {
	d := startSite(t, apiSite(true), "")
	b, _ := json.Marshal(postedReading{Counter: "pc-hood", Time: rfcTime(time.Now().Add(-time.Minute)), VolumeL: 28.3,
		Counts: map[string]uint64{"0.3": 40, "0.5": 10, "1": 2, "5": 0}})
	cases := []struct {
		method, path, token, ct string
		body                    []byte
		code                    int
	}{
		{"GET", "/api/v1/zones", "", "", nil, 200},
		{"GET", "/api/v1/zones/hood/readings", "", "", nil, 200},
		{"GET", "/metrics", "", "", nil, 200},
		{"GET", "/api/v1/zones", secretIngest, "", nil, 200}, // reads are open to anyone
		{"POST", "/api/v1/readings", "", "application/json", b, 401},
		{"PUT", "/api/v1/zones/fill/state", "", "application/json", []byte(`{"state":"at-rest","by":"x"}`), 401},
		{"GET", "/api/v1/backup", "", "", nil, 401},
		{"GET", "/api/v1/backup", secretViewer, "", nil, 403},
	}
	for _, c := range cases {
		if code, _, body := d.do(c.method, c.path, c.token, c.ct, c.body); code != c.code {
			t.Errorf("%s %s token %q: %d %s, want %d", c.method, c.path, c.token, code, body, c.code)
		}
	}
}

// TestAccessByPersonRole is the route × role table for people signed in
// on the pages (session cookie and CSRF token, no bearer token): viewer
// reads; operator also operates and signs reports as performed; QA reads
// and signs reports (reviewed, approved) but does not operate the rooms;
// admin does everything, accounts included.
func TestAccessByPersonRole(t *testing.T) {
	qa := testPerson{name: "quinn", fullName: "Quinn Adeyemi", role: "qa"}
	f := startPeopleSite(t, "15m", "", vera, piotr, qa, admin)
	order := []string{"vera", "piotr", "quinn", "kadmin"}
	now := time.Now().UTC()
	type route struct {
		name, method, path string
		body               func(password string) any
	}
	routes := []route{
		{"read zones", "GET", "/api/v1/zones", nil},
		{"read audit", "GET", "/api/v1/audit", nil},
		{"session", "GET", "/ui/session", nil},
		{"ingest", "POST", "/api/v1/readings", func(string) any {
			return map[string]any{"counter": "pc-asm-1", "time": rfcTime(now.Add(-time.Minute)), "volume_l": 28.3, "counts": map[string]int{"0.5": 10, "5": 0}}
		}},
		{"operate", "PUT", "/api/v1/zones/assembly/state", func(pw string) any {
			return map[string]any{"state": "in-operation", "reason": "shift start", "signature": map[string]string{"meaning": "performed", "password": pw}}
		}},
		{"acknowledge", "POST", "/api/v1/alarms/no-such-alarm/ack", func(string) any { return map[string]string{"comment": "checked"} }},
		{"backup", "GET", "/api/v1/backup", nil},
		{"accounts", "GET", "/ui/accounts", nil},
		{"sign report", "POST", "/certify/report/sign", func(pw string) any {
			return map[string]string{"zone": "assembly", "from": rfcTime(now.Add(-time.Hour)), "to": rfcTime(now), "meaning": "performed", "password": pw}
		}},
	}
	const ok = 0
	want := map[string][]int{ // vera (viewer), piotr (operator), quinn (qa), kadmin (admin)
		"read zones": {ok, ok, ok, ok}, "read audit": {ok, ok, ok, ok}, "session": {ok, ok, ok, ok},
		"ingest":      {403, 403, 403, ok},
		"operate":     {403, ok, 403, ok},
		"acknowledge": {403, ok, 403, ok},
		"backup":      {403, 403, 403, ok},
		"accounts":    {403, 403, 403, ok},
		"sign report": {403, ok, ok, ok},
	}
	clients := map[string]*browserLike{}
	for _, n := range order {
		clients[n] = newBrowserLike(t, f.url)
		clients[n].signIn(n, f.people[n].password)
	}
	for _, r := range routes {
		for i, n := range order {
			t.Run(r.name+"/"+f.people[n].role, func(t *testing.T) {
				var body any
				if r.body != nil {
					body = r.body(f.people[n].password)
				}
				code, _, b := clients[n].req(r.method, r.path, body, nil)
				w := want[r.name][i]
				if (w == ok && (code == 401 || code == 403 || code >= 500)) || (w != ok && code != w) {
					t.Fatalf("%s %s as %s: %d %s, want %d", r.method, r.path, n, code, b, w)
				}
				if code == 403 && !strings.Contains(string(b), "role "+f.people[n].role) {
					t.Errorf("403 does not name the person's role: %s", b)
				}
			})
		}
	}
	// Signed out, the same cookie jar gets nothing but the sign-in form.
	b := clients["kadmin"]
	b.req("POST", "/auth/signout", url.Values{"csrf_token": {b.csrf}}, nil)
	if code, _, body := b.req("GET", "/api/v1/zones", nil, nil); code != 401 {
		t.Errorf("after sign-out: %d %s, want 401", code, body)
	}
}
