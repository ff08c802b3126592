package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// The identity provider of the browser test is the npm package
// oidc-provider under Node.js (a real, independent OpenID Connect
// implementation), installed by
//
//	npm ci --prefix cmd/cleanmon/internal/people/testdata/oidc
//
// Its people and passwords are in that folder's provider.mjs.
const (
	uiProviderDir    = "internal/people/testdata/oidc"
	uiProviderSecret = "loopback-client-secret"
	uiLenaPassword   = "north-airlock-cascade-7"
)

// uiProvider runs the provider for the daemon's callback and returns its
// issuer URL; without node or the package the test skips (fails under
// CLEANMON_REQUIRE_TOOLS).
func uiProvider(t *testing.T, redirect string) string {
	t.Helper()
	node := outsideTool(t, "node", "nodejs")
	if _, err := os.Stat(filepath.Join(uiProviderDir, "node_modules", "oidc-provider", "package.json")); err != nil {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatalf("the npm package oidc-provider is missing (npm ci --prefix cmd/cleanmon/%s)", uiProviderDir)
		}
		t.Skipf("the npm package oidc-provider is missing (npm ci --prefix cmd/cleanmon/%s)", uiProviderDir)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cmd := exec.CommandContext(ctx, node, "provider.mjs")
	cmd.Dir = uiProviderDir
	cmd.Env = append(os.Environ(), "REDIRECT_URI="+redirect, "CLIENT_SECRET="+uiProviderSecret)
	var mu sync.Mutex
	var stderr bytes.Buffer
	cmd.Stderr = writerFunc(func(p []byte) (int, error) { mu.Lock(); defer mu.Unlock(); return stderr.Write(p) })
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cancel(); _ = cmd.Wait() })
	issuer := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if u, ok := strings.CutPrefix(sc.Text(), "issuer "); ok {
				issuer <- u
			}
		}
	}()
	select {
	case u := <-issuer:
		return u
	case <-time.After(30 * time.Second):
		mu.Lock()
		defer mu.Unlock()
		t.Fatalf("the provider did not start within 30 s:\n%s", stderr.String())
	}
	return ""
}

type writerFunc func([]byte) (int, error)

func (f writerFunc) Write(p []byte) (int, error) { return f(p) }

// uiSignIn fills the sign-in page and waits until the page names the
// outcome.
func (b *browser) personSignIn(url, name, password, shows string) {
	b.t.Helper()
	b.open(url+"/signin?next=/alarms", `document.body.dataset.ready === "yes" && document.getElementById("signin-csrf").value !== ""`)
	b.do(10*time.Second, "signing in as "+name,
		chromedp.SendKeys(chromedp.ID("signin-name"), name),
		chromedp.SendKeys(chromedp.ID("signin-password"), password),
		chromedp.Click(chromedp.ID("signin-submit")))
	b.waitAcrossNavigation(30*time.Second, "the page to say "+shows, fmt.Sprintf(`!!document.body && document.body.innerText.includes(%q)`, shows))
}

// waitAcrossNavigation is waitJS for a condition met only after the page
// navigates (a form post and its redirect): a check that meets the page
// mid-navigation is simply tried again.
func (b *browser) waitAcrossNavigation(bound time.Duration, what, js string) {
	b.t.Helper()
	deadline := time.Now().Add(bound)
	for time.Now().Before(deadline) {
		var ok bool
		b.evalQuiet(js, &ok)
		if ok {
			return
		}
		time.Sleep(200 * time.Millisecond)
	}
	var body string
	b.evalQuiet(`document.body ? document.body.innerText.slice(0, 3000) : ""`, &body)
	b.t.Fatalf("waiting %s for %s\npage text:\n%s%s", bound, what, body, b.consoleText())
}

// TestPeopleOnPages drives the real binary in Chromium: wrong password,
// lockout, sign-in, an acknowledgement signed with the password whose full
// name shows on the alarm and in the audit page, sign-out, sign-in through
// a real OIDC provider, and the idle time-out.
func TestPeopleOnPages(t *testing.T) {
	b := newBrowser(t)
	addr := freeAddr(t)
	issuer := uiProvider(t, "http://"+addr+"/auth/oidc/callback")
	dir := t.TempDir()
	pw := map[string]string{}
	for _, p := range []testPerson{piotr, vera} {
		var out, errb bytes.Buffer
		if code := run([]string{"user", "add", p.name, "--role", p.role, "--full-name", p.fullName, "--data", dir}, &out, &errb); code != exitOK {
			t.Fatalf("user add: %d %s", code, errb.String())
		}
		pw[p.name] = strings.TrimPrefix(strings.TrimSpace(out.String()), "password of "+p.name+" (shown once): ")
	}
	secretFile := filepath.Join(t.TempDir(), "client-secret")
	os.WriteFile(secretFile, []byte(uiProviderSecret+"\n"), 0o600)
	oidcYAML := fmt.Sprintf(`oidc:
  issuer: %q
  client_id: cleanmon
  client_secret_file: %q
  redirect_url: "http://%s/auth/oidc/callback"
  scopes: [profile, roles]
  role_claim: cleanmon_roles
  roles:
    - {value: cleanroom-qa, role: qa}
    - {value: cleanroom-operators, role: operator}
`, issuer, secretFile, addr)
	cfg := filepath.Join(t.TempDir(), "site.yaml")
	os.WriteFile(cfg, []byte(peopleSiteYAML("12s", oidcYAML)), 0o600)
	d := startDaemon(t, "--config", cfg, "--data", dir, "--listen", addr)

	// An action alarm waits for an acknowledgement: 10 000 particles
	// ≥0.5 µm in 28.3 L is 353 357 /m³, above the 280 000 action level.
	now := time.Now().UTC().Add(-3 * time.Minute).Truncate(time.Second)
	var rs []string
	for i, n := range []int{2000, 10000, 2100} {
		rs = append(rs, fmt.Sprintf(`{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":10},"flow_lpm":28.3,"status":"ok"}`, now.Add(time.Duration(i)*time.Minute).Format(time.RFC3339), n))
	}
	if code, body := call(t, "POST", d.url+"/api/v1/readings", secretIngest, "["+strings.Join(rs, ",")+"]"); code != 200 {
		t.Fatalf("POST readings: %d %s", code, body)
	}
	var alarmID string
	waitFor(t, 15*time.Second, "the action alarm", func() bool {
		_, body := call(t, "GET", d.url+"/api/v1/alarms", secretViewer, "")
		var as []struct{ ID, Kind, Level, State string }
		json.Unmarshal(body, &as)
		for _, a := range as {
			if a.Kind == "excursion" && a.Level == "action" && a.State == "active" {
				alarmID = a.ID
				return true
			}
		}
		return false
	})

	// A wrong password is refused on the page; three lock the account.
	for i := 0; i < 2; i++ {
		b.personSignIn(d.url, "vera", "not-veras-password-at-all", "Not signed in: name or password is wrong")
	}
	b.personSignIn(d.url, "vera", "not-veras-password-at-all", "Not signed in: account is locked")
	b.personSignIn(d.url, "vera", pw["vera"], "Not signed in: account is locked")

	// Sign in and acknowledge with a signature.
	b.personSignIn(d.url, "piotr", pw["piotr"], "Signed in as Piotr Lind (piotr, operator)")
	row := fmt.Sprintf(`tr[data-alarm-id=%q]`, alarmID)
	b.waitJS(15*time.Second, "the alarm in the list", fmt.Sprintf(`!!document.querySelector('%s .ack-btn')`, row))
	b.do(10*time.Second, "opening the acknowledgement", chromedp.Click(chromedp.CSS(row+" .ack-btn")))
	b.waitJS(5*time.Second, "the signature fields", `!document.getElementById("ack-sign").hidden && document.getElementById("ack-signer").textContent === "Piotr Lind (piotr)"`)
	b.do(10*time.Second, "signing the acknowledgement",
		chromedp.SendKeys(chromedp.ID("ack-comment"), "door held open for a delivery; closed and wiped"),
		chromedp.SendKeys(chromedp.ID("ack-password"), pw["piotr"]),
		chromedp.Click(chromedp.ID("ack-submit")))
	b.waitJS(20*time.Second, "the acknowledgement", `document.getElementById("alarms-msg").textContent.includes("Acknowledged by Piotr Lind (piotr)")`)
	// Acknowledged after the room was clean again, the alarm is cleared:
	// it is among the recent ones.
	b.do(10*time.Second, "showing recent alarms", chromedp.Click(chromedp.CSS(`button[data-view="all"]`)))
	b.waitJS(10*time.Second, "the signature on the alarm", fmt.Sprintf(`(() => { const r = document.querySelector('%s'); return r && r.querySelector(".acked").textContent.includes("Signed: acknowledged by Piotr Lind (piotr)"); })()`, row))
	b.screenshot("people-signed-ack")

	// The audit page: the chain checked at the top, the signature below.
	b.open(d.url+"/audit", `document.body.dataset.ready === "yes"`)
	b.waitJS(20*time.Second, "the chain's state", `document.getElementById("chain").dataset.verified === "yes" && document.getElementById("chain-head").textContent.length === 64`)
	b.do(10*time.Second, "filtering on signatures", chromedp.SetValue(chromedp.ID("f-action"), "signature"), chromedp.Click(chromedp.ID("f-run")))
	b.waitJS(20*time.Second, "the signature entry", fmt.Sprintf(`(() => { const r = document.querySelector('tr[data-action="signature"]'); return r && r.innerText.includes("full name: Piotr Lind") && r.innerText.includes(%q); })()`, "alarm "+alarmID))
	b.screenshot("people-audit")

	// Sign out: the page no longer names anyone.
	b.open(d.url+"/alarms", `document.body.dataset.person === "yes"`)
	b.do(10*time.Second, "signing out", chromedp.Click(chromedp.ID("signout-btn")))
	b.waitAcrossNavigation(20*time.Second, "the signed-out page", `document.body.dataset.person === "no" && document.getElementById("who").textContent.startsWith("Not signed in")`)

	// Sign in through the provider: its sign-in form is a bare endpoint
	// the page posts to, as the provider's own page would.
	b.open(d.url+"/signin", `document.body.dataset.ready === "yes" && !document.getElementById("oidc-box").hidden`)
	b.do(10*time.Second, "going to the provider", chromedp.Click(chromedp.ID("oidc-link")))
	b.waitAcrossNavigation(20*time.Second, "the provider's sign-in", `document.body.innerText.includes("prompt login")`)
	var submitted bool
	b.eval(fmt.Sprintf(`(() => { const f = document.createElement("form"); f.method = "post"; f.action = location.href + "/login";
		for (const [k, v] of [["login", "lena"], ["password", %q]]) { const i = document.createElement("input"); i.name = k; i.value = v; f.append(i); }
		document.body.append(f); f.submit(); return true; })()`, uiLenaPassword), &submitted)
	b.waitAcrossNavigation(30*time.Second, "the daemon's page signed in through the provider", `location.host === `+fmt.Sprintf("%q", addr)+` && document.getElementById("who") && document.getElementById("who").textContent.includes("Signed in as Lena Sorensen (lena, qa)")`)
	b.screenshot("people-oidc")

	// The idle time-out (12 s in this site): the page's own refreshes do
	// not keep the session; after it the data is refused and a reload
	// shows nobody signed in.
	b.open(d.url+"/alarms", `document.body.dataset.person === "yes"`)
	b.waitJS(40*time.Second, "the refusal after the idle time-out", `document.getElementById("banner").textContent.includes("needs a valid access token or a person signed in")`)
	b.open(d.url+"/alarms", "")
	b.waitJS(20*time.Second, "the signed-out page", `document.body.dataset.person === "no" && document.getElementById("who").textContent.startsWith("Not signed in")`)
	// The provider's bare sign-in endpoint has no icon: Chromium's request
	// for /favicon.ico there is a 404 (the console names no URL in its text).
	b.checkConsole("401", "403", "404 (Not Found)")
}

// personSignOut signs out from the alarms page.
func (b *browser) personSignOut(url string) {
	b.t.Helper()
	b.open(url+"/alarms", `document.body.dataset.person === "yes"`)
	b.do(10*time.Second, "signing out", chromedp.Click(chromedp.ID("signout-btn")))
	b.waitAcrossNavigation(20*time.Second, "the signed-out page", `document.body.dataset.person === "no" && document.getElementById("who").textContent.startsWith("Not signed in")`)
}

// TestSignaturesOnPages drives the real binary in Chromium: an admin adds
// a person on the accounts page (the password shown once); a QA reviewer
// signs a report as performed and is refused approving it; the new person
// approves it; an operator changes an operating state with a signature.
func TestSignaturesOnPages(t *testing.T) {
	b := newBrowser(t)
	dir := t.TempDir()
	pw := map[string]string{}
	for _, p := range []testPerson{piotr, ines, admin} {
		var out, errb bytes.Buffer
		if code := run([]string{"user", "add", p.name, "--role", p.role, "--full-name", p.fullName, "--data", dir}, &out, &errb); code != exitOK {
			t.Fatalf("user add: %d %s", code, errb.String())
		}
		pw[p.name] = strings.TrimPrefix(strings.TrimSpace(out.String()), "password of "+p.name+" (shown once): ")
	}
	cfg := filepath.Join(t.TempDir(), "site.yaml")
	os.WriteFile(cfg, []byte(peopleSiteYAML("15m", "")), 0o600)
	d := startDaemon(t, "--config", cfg, "--data", dir)
	start := time.Now().UTC().Add(-40 * time.Minute).Truncate(time.Minute)
	var rs []string
	for i := 0; i < 5; i++ {
		rs = append(rs, fmt.Sprintf(`{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":300,"5":2},"flow_lpm":28.3,"status":"ok"}`, start.Add(time.Duration(i+1)*time.Minute).Format(time.RFC3339)))
	}
	if code, body := call(t, "POST", d.url+"/api/v1/readings", secretIngest, "["+strings.Join(rs, ",")+"]"); code != 200 {
		t.Fatalf("POST readings: %d %s", code, body)
	}

	// The admin adds Noor; the page shows her password once.
	b.personSignIn(d.url, "kadmin", pw["kadmin"], "Signed in as Karin Admin (kadmin, admin)")
	b.open(d.url+"/accounts", `document.body.dataset.ready === "yes" && !document.getElementById("nav-accounts").hidden`)
	b.do(10*time.Second, "adding Noor",
		chromedp.SendKeys(chromedp.ID("acc-name"), "noor"),
		chromedp.SendKeys(chromedp.ID("acc-full"), "Noor Haddad"),
		chromedp.SetValue(chromedp.ID("acc-role"), "qa"),
		chromedp.Click(chromedp.ID("acc-add")))
	b.waitJS(30*time.Second, "the new password", `!!document.getElementById("new-password") && !!document.querySelector('tr[data-name="noor"]')`)
	var noorPW string
	b.eval(`document.getElementById("new-password").textContent`, &noorPW)
	// A change to an existing account asks for its reason on the page,
	// and the reason goes into the audit trail with it.
	for _, step := range []struct{ op, reason, state string }{
		{"disable", "left the coating team", "disabled"},
		{"enable", "back on the coating team", "enabled"},
	} {
		b.do(10*time.Second, step.op+" Noor",
			chromedp.Click(fmt.Sprintf(`tr[data-name="noor"] button[data-op=%q]`, step.op)))
		b.waitJS(10*time.Second, "the reason form for "+step.op, fmt.Sprintf(`!document.getElementById("acc-confirm").hidden && document.getElementById("acc-confirm").dataset.op === %q`, step.op))
		b.do(10*time.Second, "the reason for "+step.op,
			chromedp.SendKeys(chromedp.ID("acc-reason"), step.reason),
			chromedp.Click(chromedp.ID("acc-confirm-go")))
		b.waitJS(30*time.Second, "Noor "+step.state, fmt.Sprintf(`(document.querySelector('tr[data-name="noor"]') || {innerText: ""}).innerText.includes(%q) && document.getElementById("acc-confirm").hidden`, step.state))
		if code, body := call(t, "GET", d.url+"/api/v1/audit?who=kadmin&format=csv", secretViewer, ""); code != 200 || !strings.Contains(string(body), step.reason) {
			t.Errorf("the audit trail lacks the reason %q for %s (%d):\n%s", step.reason, step.op, code, body)
		}
	}
	b.personSignOut(d.url)

	period := fmt.Sprintf("zone=assembly&from=%s&to=%s", start.Format(time.RFC3339), start.Add(10*time.Minute).Format(time.RFC3339))
	signAs := func(meaning, password string) {
		b.do(10*time.Second, "signing as "+meaning,
			chromedp.SetValue(chromedp.ID("sign-meaning"), meaning),
			chromedp.SendKeys(chromedp.ID("sign-password"), password),
			chromedp.Click(chromedp.ID("sign-submit")))
	}
	// Ines signs as performed, then may not approve her own work.
	b.personSignIn(d.url, "ines", pw["ines"], "Signed in as Ines Varga (ines, qa)")
	b.open(d.url+"/certify?"+period, `document.body.dataset.certReady === "yes" && !document.getElementById("sign-form").hidden`)
	signAs("performed", pw["ines"])
	b.waitJS(30*time.Second, "the performed signature", `!!document.querySelector('#sig-list li[data-meaning="performed"][data-user="ines"]')`)
	signAs("approved", pw["ines"])
	b.waitJS(30*time.Second, "the refusal", `document.getElementById("sign-msg").textContent.includes("cannot also approve")`)
	b.screenshot("people-report-refused")
	b.personSignOut(d.url)

	// Noor, a second person, approves.
	b.personSignIn(d.url, "noor", noorPW, "Signed in as Noor Haddad (noor, qa)")
	b.open(d.url+"/certify?"+period, `document.body.dataset.certReady === "yes" && !document.getElementById("sign-form").hidden`)
	signAs("approved", noorPW)
	b.waitJS(30*time.Second, "the approval", `(() => { const li = document.querySelector('#sig-list li[data-meaning="approved"][data-user="noor"]'); return li && li.textContent.includes("approved by Noor Haddad (noor)"); })()`)
	b.screenshot("people-report-approved")
	b.personSignOut(d.url)

	// An operator changes the zone's operating state with a signature.
	b.personSignIn(d.url, "piotr", pw["piotr"], "Signed in as Piotr Lind (piotr, operator)")
	b.open(d.url+"/zones/assembly", `document.body.dataset.chartsReady === "yes" && document.body.dataset.person === "yes" && !document.getElementById("opstate-sign").hidden`)
	b.do(10*time.Second, "changing the state",
		chromedp.SetValue(chromedp.ID("opstate-state"), "at-rest"),
		chromedp.SendKeys(chromedp.ID("opstate-reason"), "end of the last shift"),
		chromedp.SendKeys(chromedp.ID("opstate-password"), pw["piotr"]),
		chromedp.Click(chromedp.CSS(`#opstate-form button[type="submit"]`)))
	b.waitJS(30*time.Second, "the new state", `document.getElementById("opstate-msg").textContent.includes("AT REST")`)
	_, body := call(t, "GET", d.url+"/api/v1/zones/assembly", secretViewer, "")
	if !strings.Contains(string(body), `"by":"Piotr Lind (piotr)"`) {
		t.Errorf("the zone's state change is not under Piotr's name: %s", body)
	}
	b.checkConsole("401", "403")
}
