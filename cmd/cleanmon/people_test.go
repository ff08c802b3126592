package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/cookiejar"
	"net/url"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/people"
)

// peopleSiteYAML is a cut-down demo site with tokens for machines and the
// rules for people: a short idle time-out and a lockout after 3 wrong
// passwords. extra is appended (e.g. signatures_required).
func peopleSiteYAML(idle, extra string) string {
	return fmt.Sprintf(`site: "Veldmark Photonics, building C (people tests)"
retention: "720h"
access:
  tokens:
    - {name: gateway, sha256: %q, role: ingest}
    - {name: display, sha256: %q, role: viewer}
    - {name: shift-lead, sha256: %q, role: operator}
accounts:
  idle_timeout: %q
  lockout: 3
zones:
  - id: assembly
    name: Assembly hall
    class: 7
    operating_state: in-operation
    area_m2: 60
    sizes: ["0.5", "5"]
    levels:
      "0.5": {alert: 180000, action: 280000}
    locations: [{id: asm-1}]
  - id: corridor
    name: Corridor
counters:
  - {id: pc-asm-1, zone: assembly, location: asm-1, flow_lpm: 28.3, sizes: ["0.5", "5"], interval: "1m"}
%s`, tokenHash(secretIngest), tokenHash(secretViewer), tokenHash(secretOperator), idle, extra)
}

// testPerson is an account made with `cleanmon user add` before the
// daemon starts.
type testPerson struct{ name, fullName, role, password string }

// peopleFixture is a daemon on a store holding the accounts of people.
type peopleFixture struct {
	*testDaemon
	people map[string]testPerson
}

// startPeopleSite adds the accounts through the command line, offline,
// then starts the daemon on the store.
func startPeopleSite(t *testing.T, idle, extra string, ps ...testPerson) *peopleFixture {
	t.Helper()
	dir := t.TempDir()
	f := &peopleFixture{people: map[string]testPerson{}}
	for _, p := range ps {
		var out, errb bytes.Buffer
		code := run([]string{"user", "add", p.name, "--role", p.role, "--full-name", p.fullName, "--data", dir}, &out, &errb)
		if code != exitOK {
			t.Fatalf("user add %s: exit %d: %s", p.name, code, errb.String())
		}
		pw, ok := strings.CutPrefix(strings.TrimSpace(out.String()), "password of "+p.name+" (shown once): ")
		if !ok || len(pw) < people.DefaultMinPasswordLen {
			t.Fatalf("user add %s printed %q, want its password once", p.name, out.String())
		}
		p.password = pw
		f.people[p.name] = p
	}
	f.testDaemon = startSite(t, peopleSiteYAML(idle, extra), dir)
	return f
}

// browserLike is an HTTP client that keeps cookies and does not follow
// redirects, as a browser's session would be seen on the wire.
type browserLike struct {
	t      *testing.T
	base   string
	c      *http.Client
	csrf   string
	origin string
}

func newBrowserLike(t *testing.T, base string) *browserLike {
	jar, err := cookiejar.New(nil)
	if err != nil {
		t.Fatal(err)
	}
	return &browserLike{t: t, base: base, origin: base, c: &http.Client{Jar: jar, Timeout: 20 * time.Second,
		CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}}
}

// req sends one request; a JSON body is sent with the session's CSRF
// token and the page's origin unless the test changed them.
func (b *browserLike) req(method, path string, body any, hdr map[string]string) (int, http.Header, []byte) {
	b.t.Helper()
	var rd io.Reader
	ctype := ""
	switch v := body.(type) {
	case nil:
	case url.Values:
		rd, ctype = strings.NewReader(v.Encode()), "application/x-www-form-urlencoded"
	default:
		j, _ := json.Marshal(v)
		rd, ctype = bytes.NewReader(j), "application/json"
	}
	r, err := http.NewRequest(method, b.base+path, rd)
	if err != nil {
		b.t.Fatal(err)
	}
	if ctype != "" {
		r.Header.Set("Content-Type", ctype)
	}
	if method != "GET" {
		if b.origin != "" {
			r.Header.Set("Origin", b.origin)
		}
		if b.csrf != "" {
			r.Header.Set(people.CSRFHeader, b.csrf)
		}
	}
	for k, v := range hdr {
		r.Header.Set(k, v)
	}
	resp, err := b.c.Do(r)
	if err != nil {
		b.t.Fatalf("%s %s: %v", method, path, err)
	}
	defer resp.Body.Close()
	out, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, resp.Header, out
}

// cookie is the session cookie the client holds now.
func (b *browserLike) cookie() string {
	u, _ := url.Parse(b.base)
	for _, c := range b.c.Jar.Cookies(u) {
		if c.Name == people.CookieName {
			return c.Value
		}
	}
	return ""
}

// signIn posts the sign-in form as the page does and returns where the
// daemon sent the browser.
func (b *browserLike) signIn(name, password string) string {
	b.t.Helper()
	code, _, body := b.req("GET", "/auth/form", nil, nil)
	var form struct{ CSRF string }
	if code != 200 || json.Unmarshal(body, &form) != nil || form.CSRF == "" {
		b.t.Fatalf("GET /auth/form: %d %s", code, body)
	}
	code, h, body := b.req("POST", "/auth/signin", url.Values{"name": {name}, "password": {password}, "csrf_token": {form.CSRF}, "next": {"/alarms"}}, nil)
	if code != http.StatusSeeOther {
		b.t.Fatalf("sign-in: %d %s, want 303", code, body)
	}
	b.csrf = ""
	if h.Get("Location") == "/alarms" {
		b.refresh()
	}
	return h.Get("Location")
}

// refresh reads the session as the pages do, keeping its CSRF token.
func (b *browserLike) refresh() map[string]any {
	b.t.Helper()
	code, _, body := b.req("GET", "/ui/session", nil, nil)
	var s map[string]any
	if code == 200 {
		json.Unmarshal(body, &s)
		b.csrf, _ = s["csrf"].(string)
	}
	return s
}

var (
	piotr = testPerson{name: "piotr", fullName: "Piotr Lind", role: "operator"}
	ines  = testPerson{name: "ines", fullName: "Ines Varga", role: "qa"}
	vera  = testPerson{name: "vera", fullName: "Vera Okafor", role: "viewer"}
	admin = testPerson{name: "kadmin", fullName: "Karin Admin", role: "admin"}
)

// TestSignInLockoutAndTimeOut: a person signs in with the password
// printed by `user add`; three wrong passwords lock the account (the right
// one is then refused too) until an admin unlocks it on the accounts
// route; the idle time-out ends a session that only the page's own
// refreshes kept busy.
func TestSignInLockoutAndTimeOut(t *testing.T) {
	f := startPeopleSite(t, "2s", "", piotr, admin)
	p := f.people["piotr"]

	b := newBrowserLike(t, f.url)
	if loc := b.signIn("piotr", p.password); loc != "/alarms" {
		t.Fatalf("sign-in sent the browser to %q, want /alarms", loc)
	}
	s := b.refresh()
	if s["full_name"] != "Piotr Lind" || s["role"] != "operator" || s["person"] != true {
		t.Fatalf("session %v, want Piotr Lind, operator", s)
	}

	// Lockout after 3 wrong passwords; the right one is refused after it.
	x := newBrowserLike(t, f.url)
	for i := 0; i < 3; i++ {
		if loc := x.signIn("piotr", "not-the-password-at-all"); !strings.HasPrefix(loc, "/signin?error=") {
			t.Fatalf("wrong password %d: sent to %q, want back to the sign-in page", i+1, loc)
		}
	}
	loc := x.signIn("piotr", p.password)
	if !strings.Contains(loc, "locked") {
		t.Fatalf("right password after the lockout: sent to %q, want a refusal naming the lock", loc)
	}
	a := newBrowserLike(t, f.url)
	a.signIn("kadmin", f.people["kadmin"].password)
	if code, _, body := a.req("POST", "/ui/accounts", map[string]string{"op": "unlock", "name": "piotr", "reason": "spoke to Piotr at the gowning room"}, nil); code != 200 {
		t.Fatalf("unlock: %d %s", code, body)
	}
	if loc := x.signIn("piotr", p.password); loc != "/alarms" {
		t.Fatalf("after unlock: sent to %q", loc)
	}
	// The lock and the unlock are in the audit trail under their actors.
	var trail []struct{ Actor, Action, Subject, Detail string }
	f.getJSON("/api/v1/audit?action=account-change", &trail)
	var locked, unlocked bool
	for _, e := range trail {
		locked = locked || strings.Contains(e.Detail, "locked: false → true")
		unlocked = unlocked || (e.Actor == "kadmin" && strings.Contains(e.Detail, "locked: true → false"))
	}
	if !locked || !unlocked {
		t.Errorf("audit trail lacks the lock or the unlock by kadmin: %+v", trail)
	}

	// Idle time-out: the page's background refreshes do not keep it alive.
	deadline := time.Now().Add(3 * time.Second)
	for time.Now().Before(deadline) {
		b.req("GET", "/api/v1/zones", nil, map[string]string{people.BackgroundHeader: "1"})
		time.Sleep(500 * time.Millisecond)
	}
	if code, _, body := b.req("GET", "/ui/session", nil, nil); code != http.StatusUnauthorized {
		t.Fatalf("after the idle time-out: %d %s, want 401 (signed out)", code, body)
	}
}

// TestSessionFixationAndCSRF: the ID a browser held before sign-in is
// worthless after it; a state change from the pages without the session's
// CSRF token, or from another origin, is refused before it reaches the
// handler.
func TestSessionFixationAndCSRF(t *testing.T) {
	f := startPeopleSite(t, "15m", "", piotr)
	b := newBrowserLike(t, f.url)
	b.req("GET", "/auth/form", nil, nil)
	planted := b.cookie()
	if planted == "" {
		t.Fatal("no pre-sign-in cookie")
	}
	b.signIn("piotr", f.people["piotr"].password)
	if b.cookie() == planted || b.cookie() == "" {
		t.Fatal("sign-in kept the session ID the browser had before")
	}
	attacker := newBrowserLike(t, f.url)
	u, _ := url.Parse(f.url)
	attacker.c.Jar.SetCookies(u, []*http.Cookie{{Name: people.CookieName, Value: planted}})
	if code, _, body := attacker.req("GET", "/ui/session", nil, nil); code != http.StatusUnauthorized {
		t.Fatalf("the planted pre-sign-in ID: %d %s, want 401", code, body)
	}

	change := map[string]any{"state": "at-rest", "reason": "end of shift",
		"signature": map[string]string{"meaning": "performed", "password": f.people["piotr"].password}}
	csrf := b.csrf
	b.csrf = ""
	if code, _, body := b.req("PUT", "/api/v1/zones/assembly/state", change, nil); code != http.StatusForbidden || !bytes.Contains(body, []byte("CSRF")) {
		t.Fatalf("without the CSRF token: %d %s, want 403 naming CSRF", code, body)
	}
	b.csrf, b.origin = csrf, "http://evil.example"
	if code, _, body := b.req("PUT", "/api/v1/zones/assembly/state", change, map[string]string{"Sec-Fetch-Site": "cross-site"}); code != http.StatusForbidden {
		t.Fatalf("from another origin: %d %s, want 403", code, body)
	}
	b.origin = f.url
	code, _, body := b.req("PUT", "/api/v1/zones/assembly/state", change, nil)
	if code != 200 {
		t.Fatalf("the signed change with the token: %d %s", code, body)
	}
	var z struct {
		OperatingState string              `json:"operating_state"`
		Change         struct{ By string } `json:"operating_state_change"`
	}
	json.Unmarshal(body, &z)
	if z.OperatingState != "at-rest" || z.Change.By != "Piotr Lind (piotr)" {
		t.Errorf("zone after the change: %+v, want at-rest by Piotr Lind (piotr)", z)
	}
}

// actionAlarm posts an excursion above the action level and waits for the
// alarm to be active.
func actionAlarm(t *testing.T, d *testDaemon) string {
	t.Helper()
	now := time.Now().UTC().Add(-2 * time.Minute).Truncate(time.Second)
	// 10 000 particles ≥0.5 µm in 28.3 L is 353 357 /m³, above the
	// 280 000 action level.
	body := fmt.Sprintf(`[{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":2000,"5":10},"flow_lpm":28.3,"status":"ok"},`+
		`{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":10000,"5":10},"flow_lpm":28.3,"status":"ok"}]`,
		now.Format(time.RFC3339), now.Add(time.Minute).Format(time.RFC3339))
	if code, _, b := d.do("POST", "/api/v1/readings", secretIngest, "application/json", []byte(body)); code != 200 {
		t.Fatalf("POST readings: %d %s", code, b)
	}
	var id string
	waitFor(t, 10*time.Second, "the action alarm", func() bool {
		var as []struct{ ID, Kind, Level, State string }
		d.getJSON("/api/v1/alarms", &as)
		for _, a := range as {
			if a.Kind == "excursion" && a.Level == "action" && a.State == "active" {
				id = a.ID
				return true
			}
		}
		return false
	})
	return id
}

type signedAlarm struct {
	ID             string
	State          string
	AcknowledgedBy string `json:"acknowledged_by"`
	Signatures     []people.Signature
}

// TestSignedAcknowledgement: a person acknowledges an action alarm only
// with a signature (password again, meaning "acknowledged"); the alarm
// then carries the full name and the signature, which is bound in the
// audit chain to the alarm with the SHA-256 of what was signed. With
// signatures_required a token is refused, saying why.
func TestSignedAcknowledgement(t *testing.T) {
	f := startPeopleSite(t, "15m", "signatures_required: true\n", piotr)
	id := actionAlarm(t, f.testDaemon)
	b := newBrowserLike(t, f.url)
	b.signIn("piotr", f.people["piotr"].password)
	path := "/api/v1/alarms/" + id + "/ack"

	if code, _, body := f.do("POST", path, secretOperator, "application/json", []byte(`{"comment":"seen"}`)); code != http.StatusForbidden || !bytes.Contains(body, []byte("signatures_required")) {
		t.Fatalf("token ack under signatures_required: %d %s, want 403 naming signatures_required", code, body)
	}
	if code, _, body := b.req("POST", path, map[string]any{"comment": "gown breach at the door"}, nil); code != http.StatusBadRequest || !bytes.Contains(body, []byte("signature")) {
		t.Fatalf("person ack without a signature: %d %s, want 400 asking for it", code, body)
	}
	if code, _, body := b.req("POST", path, map[string]any{"comment": "x", "signature": map[string]string{"meaning": "acknowledged", "password": "wrong-wrong-wrong-wrong"}}, nil); code != http.StatusForbidden {
		t.Fatalf("wrong password: %d %s, want 403", code, body)
	}
	code, _, body := b.req("POST", path, map[string]any{"comment": "gown breach at the door; cleaned",
		"signature": map[string]string{"meaning": "acknowledged", "password": f.people["piotr"].password}}, nil)
	if code != 200 {
		t.Fatalf("signed ack: %d %s", code, body)
	}
	var a signedAlarm
	if err := json.Unmarshal(body, &a); err != nil {
		t.Fatal(err)
	}
	if a.State != "acknowledged" || a.AcknowledgedBy != "Piotr Lind (piotr)" || len(a.Signatures) != 1 {
		t.Fatalf("acknowledged alarm %+v, want acknowledged by Piotr Lind (piotr) with one signature", a)
	}
	sig := a.Signatures[0]
	if sig.Meaning != people.MeaningAcknowledged || sig.FullName != "Piotr Lind" || sig.UserName != "piotr" || len(sig.SHA256) != 64 || sig.AuditSeq == 0 {
		t.Errorf("signature %+v", sig)
	}
	// In the audit trail: the signature entry names the alarm, readable.
	var trail []struct {
		Seq                            uint64
		Actor, Action, Subject, Detail string
	}
	f.getJSON("/api/v1/audit?action=signature&who=piotr", &trail)
	if len(trail) != 1 || trail[0].Seq != sig.AuditSeq || trail[0].Subject != "alarm "+id ||
		!strings.Contains(trail[0].Detail, "full name: Piotr Lind") || !strings.Contains(trail[0].Detail, "sha256: "+sig.SHA256) {
		t.Fatalf("audit signature entries %+v, want one for alarm %s with seq %d", trail, id, sig.AuditSeq)
	}
	// After a restart the alarm still shows its signature.
	f.stop()
	d2 := startSite(t, peopleSiteYAML("15m", "signatures_required: true\n"), f.dataDir)
	var all []signedAlarm
	d2.getJSON("/api/v1/alarms?state=all", &all)
	found := false
	for _, x := range all {
		if x.ID == id {
			found = len(x.Signatures) == 1 && x.Signatures[0].SHA256 == sig.SHA256
		}
	}
	if !found {
		t.Errorf("after a restart the alarm lacks its signature: %+v", all)
	}
}

// TestAuditTrailFilters: readable details (no base64), the filters, and
// the CSV export of the same entries.
func TestAuditTrailFilters(t *testing.T) {
	f := startPeopleSite(t, "15m", "", piotr)
	actionAlarm(t, f.testDaemon)
	var all []struct {
		Action, Subject, Detail, Actor string
		Covers                         []string
	}
	f.getJSON("/api/v1/audit?zone=assembly", &all)
	var batch bool
	for _, e := range all {
		if strings.Contains(e.Detail, "base64") {
			t.Errorf("entry %s still has base64: %s", e.Action, e.Detail)
		}
		if e.Action == "readings-batch" {
			batch = strings.Contains(e.Detail, "counter pc-asm-1: 2") && len(e.Covers) == 1
		}
	}
	if !batch {
		t.Errorf("no readable readings batch of pc-asm-1 in the zone's trail: %+v", all)
	}
	var none []struct{ Action string }
	f.getJSON("/api/v1/audit?zone=corridor&action=readings-batch", &none)
	if len(none) != 0 {
		t.Errorf("the corridor has no counter, yet %d readings batches matched", len(none))
	}
	code, h, body := f.do("GET", "/api/v1/audit?action=account-add&format=csv", secretViewer, "", nil)
	if code != 200 || !strings.HasPrefix(h.Get("Content-Type"), "text/csv") {
		t.Fatalf("CSV: %d %s", code, h.Get("Content-Type"))
	}
	lines := strings.Split(strings.TrimSpace(string(body)), "\n")
	if lines[0] != "seq,time,actor,action,subject,reason,detail,hash" || !strings.Contains(string(body), "piotr: add") || !strings.Contains(string(body), "full name: Piotr Lind") {
		t.Errorf("CSV:\n%s", body)
	}
	if code, _, body := f.do("GET", "/api/v1/audit?zone=nowhere", secretViewer, "", nil); code != 400 || !bytes.Contains(body, []byte("zone")) {
		t.Errorf("unknown zone: %d %s, want 400 naming zone", code, body)
	}
}

// TestReportApproval: a report signed as performed is approved by a second
// person; the performer's own approval is refused saying why; an operator
// cannot approve; the printed report carries the signatures.
func TestReportApproval(t *testing.T) {
	inesPerf := testPerson{name: "noor", fullName: "Noor Haddad", role: "qa"}
	f := startPeopleSite(t, "15m", "", piotr, ines, inesPerf)
	now := time.Now().UTC().Add(-30 * time.Minute).Truncate(time.Minute)
	var rs []string
	for i := 0; i < 5; i++ {
		rs = append(rs, fmt.Sprintf(`{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":300,"5":2},"flow_lpm":28.3,"status":"ok"}`, now.Add(time.Duration(i)*time.Minute).Format(time.RFC3339)))
	}
	if code, _, b := f.do("POST", "/api/v1/readings", secretIngest, "application/json", []byte("["+strings.Join(rs, ",")+"]")); code != 200 {
		t.Fatalf("POST readings: %d %s", code, b)
	}
	from, to := now.Add(-time.Minute).Format(time.RFC3339), now.Add(10*time.Minute).Format(time.RFC3339)
	sign := func(b *browserLike, who, meaning string) (int, []byte) {
		code, _, body := b.req("POST", "/certify/report/sign", map[string]string{"zone": "assembly", "from": from, "to": to, "meaning": meaning, "password": f.people[who].password}, nil)
		return code, body
	}
	op := newBrowserLike(t, f.url)
	op.signIn("piotr", f.people["piotr"].password)
	if code, body := sign(op, "piotr", "approved"); code != 400 || !bytes.Contains(body, []byte("may sign a report as performed")) {
		t.Fatalf("operator approving: %d %s, want 400", code, body)
	}
	if code, body := sign(op, "piotr", "performed"); code != 200 {
		t.Fatalf("performed: %d %s", code, body)
	}
	// Noor (QA) performs a second report's work and may not approve it.
	nb := newBrowserLike(t, f.url)
	nb.signIn("noor", f.people["noor"].password)
	to2 := now.Add(11 * time.Minute).Format(time.RFC3339)
	if code, _, body := nb.req("POST", "/certify/report/sign", map[string]string{"zone": "assembly", "from": from, "to": to2, "meaning": "performed", "password": f.people["noor"].password}, nil); code != 200 {
		t.Fatalf("noor performed: %d %s", code, body)
	}
	code, _, body := nb.req("POST", "/certify/report/sign", map[string]string{"zone": "assembly", "from": from, "to": to2, "meaning": "approved", "password": f.people["noor"].password}, nil)
	if code != 403 || !bytes.Contains(body, []byte("cannot also approve")) {
		t.Fatalf("the performer approving: %d %s, want 403 saying a second person must", code, body)
	}
	ib := newBrowserLike(t, f.url)
	ib.signIn("ines", f.people["ines"].password)
	code, body = sign(ib, "ines", "approved")
	if code != 200 {
		t.Fatalf("second person approving: %d %s", code, body)
	}
	var sigs []struct {
		people.Signature
		Matches bool
	}
	json.Unmarshal(body, &sigs)
	if len(sigs) != 2 || sigs[0].UserName != "piotr" || sigs[1].UserName != "ines" || sigs[1].Meaning != people.MeaningApproved || !sigs[1].Matches {
		t.Fatalf("signatures %+v", sigs)
	}
	q := url.Values{"zone": {"assembly"}, "from": {from}, "to": {to}}
	code, _, html := f.do("GET", "/certify/report?"+q.Encode(), secretViewer, "", nil)
	if code != 200 || !bytes.Contains(html, []byte("approved by Ines Varga (ines)")) || !bytes.Contains(html, []byte("performed by Piotr Lind (piotr)")) {
		t.Fatalf("printed report: %d, signatures missing:\n%s", code, uiReportBody(t, html))
	}
}

// TestUserCommandRefusesARunningDaemon: accounts are changed offline;
// while a daemon holds the store the command says so and changes nothing.
func TestUserCommandRefusesARunningDaemon(t *testing.T) {
	f := startPeopleSite(t, "15m", "", piotr)
	var out, errb bytes.Buffer
	code := run([]string{"user", "add", "lena", "--role", "viewer", "--full-name", "Lena Berg", "--data", f.dataDir}, &out, &errb)
	if code != exitFail || !strings.Contains(errb.String(), "in use by a running cleanmon") || !strings.Contains(errb.String(), "/accounts") {
		t.Fatalf("exit %d, stderr %q; want 1 and a message naming the running daemon and the accounts page", code, errb.String())
	}
	a := newBrowserLike(t, f.url)
	a.signIn("piotr", f.people["piotr"].password)
	if c, _, _ := a.req("GET", "/ui/accounts", nil, nil); c != http.StatusForbidden {
		t.Errorf("an operator listing accounts: %d, want 403", c)
	}
}
