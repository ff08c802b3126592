package main

import (
	"context"
	"errors"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"cleanmon/store"

	bolt "go.etcd.io/bbolt"
)

// zeroPage writes 4 KiB of zeros over page p of a store file.
func zeroPage(t *testing.T, path string, p int64) {
	t.Helper()
	f, err := os.OpenFile(path, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := f.WriteAt(make([]byte, 4096), p*4096); err != nil {
		t.Fatal(err)
	}
}

// damagedPage finds a leaf page of a copy of data whose zeroing the
// store still opens but its start-up check finds: the damage a daemon
// must not write on. At most 40 candidates are tried, from the start of
// the file or, with last, from its end.
func damagedPage(t *testing.T, data string, last bool) int64 {
	t.Helper()
	db, err := bolt.Open(filepath.Join(data, store.FileName), 0o600, &bolt.Options{ReadOnly: true, Timeout: time.Second, PreLoadFreelist: true})
	if err != nil {
		t.Fatal(err)
	}
	var leaves []int64
	db.View(func(tx *bolt.Tx) error {
		for id := 2; id < int(tx.Size()/4096); id++ {
			if pi, err := tx.Page(id); err == nil && pi != nil && pi.Type == "leaf" {
				leaves = append(leaves, int64(id))
			}
		}
		return nil
	})
	db.Close()
	if last {
		for i, j := 0, len(leaves)-1; i < j; i, j = i+1, j-1 {
			leaves[i], leaves[j] = leaves[j], leaves[i]
		}
	}
	if len(leaves) > 40 {
		leaves = leaves[:40]
	}
	for _, p := range leaves {
		dir := copyDataDir(t, data)
		zeroPage(t, filepath.Join(dir, store.FileName), p)
		st, err := store.Open(dir, store.Options{NoSync: true})
		if err != nil {
			continue
		}
		qerr := st.CheckQuick(context.Background(), store.CheckOptions{})
		st.Close()
		var ie *store.IntegrityError
		if errors.As(qerr, &ie) {
			return p
		}
	}
	t.Fatalf("none of the leaf pages %v, zeroed, is opened and then found by the check", leaves)
	return 0
}

// TestDamagedStoreAtStart zeroes one page of a real data directory: the
// daemon starts, refuses every write with 503 naming the fault, says not
// ready, raises an integrity action alarm, keeps serving reads, and its
// message names the exact `cleanmon verify` command, which then runs and
// lists the faults, and the latest backup.
func TestDamagedStoreAtStart(t *testing.T) {
	for _, last := range []bool{false, true} {
		t.Run(map[bool]string{false: "first leaf page", true: "last leaf page"}[last], func(t *testing.T) { damagedStart(t, last) })
	}
}

func damagedStart(t *testing.T, last bool) {
	data := t.TempDir()
	cfg := trustSite(t, "", "")
	d := startDaemon(t, "--config", cfg, "--data", data)
	postReadings(t, d.url, 400)
	if code, _, err := apiDo(context.Background(), http.MethodGet, d.url+"/api/v1/backup", nil, ""); err != nil || code != 200 {
		t.Fatalf("backup: %d %v", code, err)
	}
	d.stop()
	zeroPage(t, filepath.Join(data, store.FileName), damagedPage(t, data, last))

	d = startDaemon(t, "--config", cfg, "--data", data)
	get := func(path, token string) (int, string) {
		req, _ := http.NewRequest(http.MethodGet, d.url+path, nil)
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(b)
	}
	if code, b := get("/readyz", ""); code != http.StatusServiceUnavailable || strings.Contains(b, "verify") {
		t.Errorf("readyz without a token: %d %s, want a bare 503", code, b)
	}
	if code, b := get("/readyz", crashToken); code != http.StatusServiceUnavailable || !strings.Contains(b, "integrity") {
		t.Errorf("readyz: %d %s, want 503 naming the integrity fault", code, b)
	}
	for _, w := range []struct{ method, path, body string }{
		{"POST", "/api/v1/readings", `{"counter":"pc-0","time":"` + readingTime(500) + `","volume_l":28.3,"counts":{"0.5":10,"5":1}}`},
		{"PUT", "/api/v1/zones/assembly/state", `{"state":"at-rest","reason":"end of shift"}`},
	} {
		code, b, err := apiDo(context.Background(), w.method, d.url+w.path, []byte(w.body), "application/json")
		if err != nil || code != http.StatusServiceUnavailable || !strings.Contains(string(b), "integrity") || !strings.Contains(string(b), "cleanmon verify") {
			t.Errorf("%s %s: %d %v %s, want 503 naming the fault and the verify command", w.method, w.path, code, err, b)
		}
	}
	if code, b := get("/api/v1/zones", crashToken); code != 200 || !strings.Contains(b, `"assembly"`) {
		t.Errorf("reads stopped: %d %s", code, b)
	}
	// Reading the damaged part itself answers (an error, or a stream that
	// says it failed) and the daemon lives on.
	get("/api/v1/audit", crashToken)
	get("/api/v1/zones/assembly/readings?location=loc-0&from="+readingTime(0)+"&to="+readingTime(400), crashToken)
	if code, _ := get("/healthz", ""); code != 200 {
		t.Errorf("healthz after reading the damaged part: %d", code)
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		_, b := get("/api/v1/alarms", crashToken)
		if strings.Contains(b, `"kind":"integrity"`) && strings.Contains(b, `"level":"action"`) {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("no integrity action alarm: %s\n%s", b, d.logs.String())
		}
		time.Sleep(100 * time.Millisecond)
	}
	logs := d.logs.String()
	m := regexp.MustCompile("run `(cleanmon verify [^`]+)`").FindStringSubmatch(logs)
	if m == nil || !(strings.Contains(logs, "latest backup on record: ") || strings.Contains(logs, "the record of backups cannot be read")) {
		t.Fatalf("the message names no verify command or backup:\n%s", logs)
	}
	d.stop()
	args := strings.Fields(m[1])[1:]
	code, out, errs := runCLI(t, args...)
	if code != exitFail || !strings.Contains(out, "fault:") {
		t.Errorf("`%s`: exit %d, want 1 with the faults listed\n%s%s", m[1], code, out, errs)
	}
}

// TestUncleanStopRecorded: a start after kill -9 writes an unclean-stop
// entry naming the last entry before it.
func TestUncleanStopRecorded(t *testing.T) {
	data := t.TempDir()
	cfg := trustSite(t, "", "")
	d := startDaemon(t, "--config", cfg, "--data", data)
	postReadings(t, d.url, 10)
	es := auditEntries(t, d.url)
	if len(es) == 0 {
		t.Fatal("no audit entries")
	}
	last := es[len(es)-1]["seq"]
	d.kill()
	d = startDaemon(t, "--config", cfg, "--data", data)
	found := false
	for _, e := range auditEntries(t, d.url) {
		if e["action"] == store.AuditUncleanStop {
			found = true
			if subj, _ := e["subject"].(string); subj != "#"+formatSeq(last) {
				t.Errorf("unclean-stop names %q, want #%v", subj, last)
			}
		}
	}
	if !found {
		t.Error("no unclean-stop entry after kill -9")
	}
	d.stop()
	d = startDaemon(t, "--config", cfg, "--data", data)
	n := 0
	for _, e := range auditEntries(t, d.url) {
		if e["action"] == store.AuditUncleanStop {
			n++
		}
	}
	if n != 1 {
		t.Errorf("%d unclean-stop entries after a clean stop and start, want 1", n)
	}
}

// formatSeq writes a JSON number as the whole number it is.
func formatSeq(v any) string {
	f, _ := v.(float64)
	return strconv.FormatFloat(f, 'f', -1, 64)
}
