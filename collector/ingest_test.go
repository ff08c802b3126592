package collector

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"
)

// serve runs the ingest handlers on a real loopback HTTP server.
func serve(t *testing.T, in *Ingest) *httptest.Server {
	t.Helper()
	mux := http.NewServeMux()
	mux.HandleFunc("/api/v1/readings", in.Readings)
	mux.HandleFunc("/api/v1/pressure", in.Pressure)
	srv := httptest.NewServer(mux) // listens on 127.0.0.1
	t.Cleanup(srv.Close)
	return srv
}

type answer struct {
	status int
	body   map[string]any
	raw    string
}

func post(t *testing.T, srv *httptest.Server, method, path, ctype string, body io.Reader) answer {
	t.Helper()
	a, err := tryPost(srv, method, path, ctype, body)
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// tryPost is post without the test's FailNow, for other goroutines.
func tryPost(srv *httptest.Server, method, path, ctype string, body io.Reader) (answer, error) {
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, method, srv.URL+path, body)
	if err != nil {
		return answer{}, err
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := srv.Client().Do(req)
	if err != nil {
		return answer{}, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(io.LimitReader(resp.Body, 1<<20))
	if err != nil {
		return answer{}, err
	}
	a := answer{status: resp.StatusCode, raw: string(b)}
	if err := json.Unmarshal(b, &a.body); err != nil {
		return a, fmt.Errorf("answer %d is not a JSON object: %q", resp.StatusCode, b)
	}
	if ct := resp.Header.Get("Content-Type"); ct != "application/json" {
		return a, fmt.Errorf("answer Content-Type %q", ct)
	}
	return a, nil
}

// good is a valid reading of pc-asm-1 (channels 0.5, 1, 5 µm, cumulative).
const good = `{"counter":"pc-asm-1","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.5":310,"1":80,"5":2}}`

// withField returns good with one field replaced (or added) by a raw JSON
// fragment, or removed when frag is "".
func withField(t *testing.T, name, frag string) string {
	t.Helper()
	var m map[string]json.RawMessage
	if err := json.Unmarshal([]byte(good), &m); err != nil {
		t.Fatal(err)
	}
	if frag == "" {
		delete(m, name)
	} else {
		m[name] = json.RawMessage(frag)
	}
	b, err := json.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func TestBadRequestsCommitNothing(t *testing.T) {
	const ndjson = "application/x-ndjson"
	type tc struct {
		name   string
		method string // default POST
		path   string // default readings
		ctype  string // default application/json
		body   string
		status int
		field  string // "" = no field expected
		index  int    // -1 = no index expected
	}
	cases := []tc{
		{name: "wrong content type", ctype: "text/plain", body: good, status: 415, index: -1},
		{name: "form content type", ctype: "application/x-www-form-urlencoded", body: good, status: 415, index: -1},
		{name: "empty body", body: "", status: 400, index: 0},
		{name: "scalar body", body: `42`, status: 400, index: 0},
		{name: "malformed JSON", body: `{"counter":"pc-asm-1",`, status: 400, index: 0},
		{name: "syntax error", body: `{"counter" "pc-asm-1"}`, status: 400, index: 0},
		{name: "trailing garbage after object", body: good + ` xyz`, status: 400, index: 0},
		{name: "second object after object", body: good + good, status: 400, index: 0},
		{name: "trailing garbage after array", body: `[` + good + `,` + good + `] {}`, status: 400, index: 1},
		{name: "array not closed", body: `[` + good, status: 400, index: 1},
		{name: "unknown field", body: withField(t, "colour", `"red"`), status: 400, field: "colour", index: 0},
		{name: "unknown counter", body: withField(t, "counter", `"pc-lab-9"`), status: 400, field: "counter", index: 0},
		{name: "counter missing", body: withField(t, "counter", ""), status: 400, field: "counter", index: 0},
		{name: "counter not a string", body: withField(t, "counter", `7`), status: 400, field: "counter", index: 0},
		{name: "time missing", body: withField(t, "time", ""), status: 400, field: "time", index: 0},
		{name: "time unparsable", body: withField(t, "time", `"2026-03-02 10:00"`), status: 400, field: "time", index: 0},
		{name: "time without zone", body: withField(t, "time", `"2026-03-02T10:00:00"`), status: 400, field: "time", index: 0},
		{name: "time older than retention", body: withField(t, "time", `"2026-01-01T00:00:00Z"`), status: 400, field: "time", index: 0},
		{name: "time too far ahead", body: withField(t, "time", `"2026-03-02T10:06:01Z"`), status: 400, field: "time", index: 0},
		{name: "counts missing", body: withField(t, "counts", ""), status: 400, field: "counts", index: 0},
		{name: "counts empty", body: withField(t, "counts", `{}`), status: 400, field: "counts", index: 0},
		{name: "counts not an object", body: withField(t, "counts", `[310,80,2]`), status: 400, field: "counts", index: 0},
		{name: "counts missing a channel", body: withField(t, "counts", `{"0.5":310,"1":80}`), status: 400, field: "counts.5", index: 0},
		{name: "channel the counter lacks", body: withField(t, "counts", `{"0.3":900,"0.5":310,"1":80,"5":2}`), status: 400, field: "counts.0.3", index: 0},
		{name: "key not a size", body: withField(t, "counts", `{"0.5":310,"1":80,"5":2,"big":1}`), status: 400, field: "counts.big", index: 0},
		{name: "key beyond 5 µm", body: withField(t, "counts", `{"0.5":310,"1":80,"5":2,"10":1}`), status: 400, field: "counts.10", index: 0},
		{name: "same channel twice", body: withField(t, "counts", `{"0.5":310,"0.5um":310,"1":80,"5":2}`), status: 400, field: "counts.0.5um", index: 0},
		{name: "count not an integer", body: withField(t, "counts", `{"0.5":310.5,"1":80,"5":2}`), status: 400, field: "counts.0.5", index: 0},
		{name: "count negative", body: withField(t, "counts", `{"0.5":310,"1":-1,"5":2}`), status: 400, field: "counts.1", index: 0},
		{name: "count beyond 2^53", body: withField(t, "counts", `{"0.5":9007199254740993,"1":80,"5":2}`), status: 400, field: "counts.0.5", index: 0},
		{name: "count as string", body: withField(t, "counts", `{"0.5":"310","1":80,"5":2}`), status: 400, field: "counts.0.5", index: 0},
		{name: "count null", body: withField(t, "counts", `{"0.5":null,"1":80,"5":2}`), status: 400, field: "counts.0.5", index: 0},
		{name: "cumulative rising with size", body: withField(t, "counts", `{"0.5":310,"1":400,"5":2}`), status: 400, field: "counts.1", index: 0},
		{name: "volume missing", body: withField(t, "volume_l", ""), status: 400, field: "volume_l", index: 0},
		{name: "volume zero", body: withField(t, "volume_l", `0`), status: 400, field: "volume_l", index: 0},
		{name: "volume negative", body: withField(t, "volume_l", `-28.3`), status: 400, field: "volume_l", index: 0},
		{name: "volume a string", body: withField(t, "volume_l", `"28.3"`), status: 400, field: "volume_l", index: 0},
		{name: "volume out of range", body: withField(t, "volume_l", `1e999`), status: 400, field: "volume_l", index: 0},
		// 28.3 L/min × 30 s / 60 = 14.15 L, and 28.3 L is 100 % off.
		{name: "volume inconsistent with flow and time", body: strings.Replace(good, `"volume_l":28.3`, `"volume_l":28.3,"flow_lpm":28.3,"sample_s":30`, 1), status: 400, field: "volume_l", index: 0},
		{name: "flow negative", body: withField(t, "flow_lpm", `-1`), status: 400, field: "flow_lpm", index: 0},
		{name: "sample time negative", body: withField(t, "sample_s", `-60`), status: 400, field: "sample_s", index: 0},
		{name: "unknown status", body: withField(t, "status", `"broken"`), status: 400, field: "status", index: 0},
		{name: "unknown mode", body: withField(t, "mode", `"per-litre"`), status: 400, field: "mode", index: 0},
		{name: "bad third element of array", body: `[` + good + `,` + strings.Replace(good, "10:00:00", "10:00:01", 1) + `,` + withField(t, "status", `"meh"`) + `]`, status: 400, field: "status", index: 2},
		{name: "array element not an object", body: `[` + good + `, 5]`, status: 400, index: 1},
		{name: "array elements without comma", body: `[` + good + ` ` + good + `]`, status: 400, index: 1},
		{name: "bad NDJSON line after blank lines", ctype: ndjson, body: good + "\n\n" + strings.Replace(good, "10:00:00", "10:00:01", 1) + "\r\n  \n" + withField(t, "volume_l", `0`) + "\n", status: 400, field: "volume_l", index: 2},
		{name: "NDJSON two objects on a line", ctype: ndjson, body: good + " " + good + "\n", status: 400, index: 0},
		{name: "NDJSON array line", ctype: ndjson, body: good + "\n[" + good + "]\n", status: 400, index: 1},
		{name: "NDJSON unknown field", ctype: ndjson, body: good + "\n" + withField(t, "Flow", `1`) + "\n", status: 400, field: "Flow", index: 1},
		{name: "NDJSON only blank lines", ctype: ndjson, body: "\n \n\r\n", status: 400, index: 0},
		{name: "NDJSON truncated line", ctype: ndjson, body: good + "\n" + good[:40], status: 400, index: 1},
		{name: "pressure missing pa", path: "/api/v1/pressure", body: `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z"}`, status: 400, field: "pa", index: 0},
		{name: "pressure pa a string", path: "/api/v1/pressure", body: `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":"12"}`, status: 400, field: "pa", index: 0},
		{name: "pressure pa infinite", path: "/api/v1/pressure", body: `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":-1e400}`, status: 400, field: "pa", index: 0},
		{name: "pressure unknown sensor", path: "/api/v1/pressure", body: `[{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12},{"sensor":"dp-x","time":"2026-03-02T10:00:00Z","pa":12}]`, status: 400, field: "sensor", index: 1},
		{name: "pressure time unparsable", path: "/api/v1/pressure", body: `{"sensor":"dp-asm-gown","time":"yesterday","pa":12}`, status: 400, field: "time", index: 0},
		{name: "pressure unknown field", path: "/api/v1/pressure", body: `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12,"unit":"Pa"}`, status: 400, field: "unit", index: 0},
		{name: "pressure NDJSON bad line", path: "/api/v1/pressure", ctype: ndjson, body: `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12}` + "\n" + `{"sensor":"dp-asm-gown","pa":12}`, status: 400, field: "time", index: 1},
	}
	if len(cases) < 25 {
		t.Fatalf("only %d cases", len(cases))
	}
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{})
	var seen []Reading
	in.OnReadings(func(rs []Reading) { seen = append(seen, rs...) })
	var rejections int
	in.OnRejected(func(Rejection) { rejections++ })
	srv := serve(t, in)
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			method, path, ctype := c.method, c.path, c.ctype
			if method == "" {
				method = http.MethodPost
			}
			if path == "" {
				path = "/api/v1/readings"
			}
			if ctype == "" {
				ctype = "application/json"
			}
			before := rejections
			a := post(t, srv, method, path, ctype, strings.NewReader(c.body))
			if a.status != c.status {
				t.Fatalf("status %d, want %d: %s", a.status, c.status, a.raw)
			}
			t.Log(a.raw)
			msg, _ := a.body["error"].(string)
			if msg == "" {
				t.Fatalf("no error text: %s", a.raw)
			}
			if c.index >= 0 {
				idx, ok := a.body["index"].(float64)
				if !ok || int(idx) != c.index {
					t.Errorf("index %v, want %d: %s", a.body["index"], c.index, a.raw)
				}
			}
			if c.field != "" {
				if f, _ := a.body["field"].(string); f != c.field {
					t.Errorf("field %q, want %q: %s", f, c.field, a.raw)
				}
				if !strings.Contains(msg, c.field) {
					t.Errorf("error text %q does not name %q", msg, c.field)
				}
			}
			if rejections != before+1 {
				t.Errorf("%d rejections reported, want 1", rejections-before)
			}
			if nr, np := sink.stored(); nr != 0 || np != 0 || sink.commits != 0 {
				t.Fatalf("sink holds %d readings, %d DP samples after %d commits", nr, np, sink.commits)
			}
		})
	}
	if len(seen) != 0 {
		t.Errorf("observers saw %d readings of refused requests", len(seen))
	}
}

func TestBodyTooLarge(t *testing.T) {
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{MaxBodyBytes: 1024})
	srv := serve(t, in)
	var big bytes.Buffer
	big.WriteString("[")
	for i := 0; big.Len() < 2048; i++ {
		if i > 0 {
			big.WriteString(",")
		}
		big.WriteString(good)
	}
	big.WriteString("]")
	line := strings.Repeat(good+"\n", 20)
	for _, c := range []struct {
		name, ctype string
		body        io.Reader
	}{
		{"declared length", "application/json", bytes.NewReader(big.Bytes())},
		// A plain io.Reader makes the client send chunked, no length known.
		{"chunked array", "application/json", io.MultiReader(bytes.NewReader(big.Bytes()))},
		{"chunked NDJSON", "application/x-ndjson", io.MultiReader(strings.NewReader(line))},
	} {
		t.Run(c.name, func(t *testing.T) {
			a := post(t, srv, http.MethodPost, "/api/v1/readings", c.ctype, c.body)
			if a.status != http.StatusRequestEntityTooLarge {
				t.Fatalf("status %d, want 413: %s", a.status, a.raw)
			}
			if nr, _ := sink.stored(); nr != 0 {
				t.Fatalf("%d readings stored", nr)
			}
		})
	}
}

func TestSinkFailureIs503(t *testing.T) {
	sink := newMemSink()
	sink.fail = errDiskFull
	in := newTestIngest(t, sink, IngestOptions{})
	called := false
	in.OnReadings(func([]Reading) { called = true })
	srv := serve(t, in)
	a := post(t, srv, http.MethodPost, "/api/v1/readings", "application/json", strings.NewReader(good))
	if a.status != http.StatusServiceUnavailable {
		t.Fatalf("status %d, want 503: %s", a.status, a.raw)
	}
	if msg, _ := a.body["error"].(string); !strings.Contains(msg, errDiskFull.Error()) {
		t.Errorf("error %q does not carry the sink's reason", msg)
	}
	a = post(t, srv, http.MethodPost, "/api/v1/pressure", "application/json", strings.NewReader(`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12}`))
	if a.status != http.StatusServiceUnavailable {
		t.Fatalf("pressure status %d, want 503: %s", a.status, a.raw)
	}
	if called {
		t.Error("observer ran without a durable commit")
	}
	_, err := in.SubmitReadings(context.Background(), []RawReading{mustRaw(t, good)})
	if !errors.Is(err, ErrCommit) || !errors.Is(err, errDiskFull) {
		t.Errorf("SubmitReadings error %v, want ErrCommit wrapping the sink's", err)
	}
}

func mustRaw(t testing.TB, s string) RawReading {
	t.Helper()
	var r RawReading
	dec := json.NewDecoder(strings.NewReader(s))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&r); err != nil {
		t.Fatal(err)
	}
	return r
}

func TestAcceptedShapes(t *testing.T) {
	at := func(sec int) string {
		return strings.Replace(good, "10:00:00", "10:00:"+twoDigits(sec), 1)
	}
	cases := []struct {
		name, ctype, body string
		accepted, dups    int
	}{
		{"object", "application/json", good, 1, 0},
		{"object, charset, no trailing newline", "application/json; charset=utf-8", "\n  " + at(1) + "  \n", 1, 0},
		{"no content type", "", at(2), 1, 0},
		{"array", "application/json", "[" + at(3) + "," + at(4) + "," + at(5) + "]", 3, 0},
		{"empty array", "application/json", "[]", 0, 0},
		{"NDJSON with blank and CRLF lines", "application/x-ndjson", at(6) + "\r\n\r\n" + at(7) + "\n   \n" + at(8), 3, 0},
		{"duplicates inside one request count once", "application/json", "[" + at(9) + "," + at(9) + "," + at(10) + "," + at(9) + "]", 2, 2},
		{"same time, other zone offset, is a duplicate", "application/json", strings.Replace(at(10), "Z", "+00:00", 1), 0, 1},
		{"resent readings are duplicates", "application/x-ndjson", at(3) + "\n" + at(4) + "\n" + at(11), 1, 2},
	}
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{})
	var observed []Reading
	in.OnReadings(func(rs []Reading) { observed = append(observed, rs...) })
	srv := serve(t, in)
	total := 0
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			a := post(t, srv, http.MethodPost, "/api/v1/readings", c.ctype, strings.NewReader(c.body))
			if a.status != http.StatusOK {
				t.Fatalf("status %d: %s", a.status, a.raw)
			}
			if got := int(a.body["accepted"].(float64)); got != c.accepted {
				t.Errorf("accepted %d, want %d", got, c.accepted)
			}
			if got := int(a.body["duplicates"].(float64)); got != c.dups {
				t.Errorf("duplicates %d, want %d", got, c.dups)
			}
			total += c.accepted
			if nr, _ := sink.stored(); nr != total {
				t.Errorf("sink holds %d readings, want %d", nr, total)
			}
		})
	}
	// Observers see each new reading once; resent ones may reappear, but
	// only with a commit that accepted something.
	if len(observed) < total {
		t.Errorf("observers saw %d readings, fewer than the %d stored", len(observed), total)
	}
	a := post(t, srv, http.MethodPost, "/api/v1/pressure", "application/x-ndjson",
		strings.NewReader(`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12.4}`+"\n"+`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:10Z","pa":-0.5}`+"\n"+`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12.4}`))
	if a.status != 200 || a.body["accepted"].(float64) != 2 || a.body["duplicates"].(float64) != 1 {
		t.Fatalf("pressure: %d %s", a.status, a.raw)
	}
	if _, np := sink.stored(); np != 2 {
		t.Errorf("sink holds %d DP samples, want 2", np)
	}
}

func twoDigits(n int) string { return string([]byte{byte('0' + n/10), byte('0' + n%10)}) }

func TestObserversRunAfterCommit(t *testing.T) {
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{})
	var gotR []Reading
	var gotP []Pressure
	in.OnReadings(func(rs []Reading) {
		// The commit is durable before observers run.
		if nr, _ := sink.stored(); nr < len(rs) {
			t.Errorf("observer ran before the commit: sink holds %d", nr)
		}
		gotR = append(gotR, rs...)
	})
	in.OnPressure(func(ps []Pressure) { gotP = append(gotP, ps...) })
	res, err := in.SubmitReadings(context.Background(), []RawReading{mustRaw(t, good)})
	if err != nil || res != (Result{Accepted: 1}) {
		t.Fatalf("SubmitReadings: %+v %v", res, err)
	}
	res, err = in.SubmitPressure(context.Background(), []RawPressure{{Sensor: "dp-hood-asm", Time: "2026-03-02T10:00:00+01:00", Pa: f64(11.5)}})
	if err != nil || res != (Result{Accepted: 1}) {
		t.Fatalf("SubmitPressure: %+v %v", res, err)
	}
	if len(gotR) != 1 || gotR[0].Counter != "pc-asm-1" || gotR[0].Zone != "assembly" || gotR[0].Location != "pc-asm-1" {
		t.Errorf("observed readings %+v", gotR)
	}
	want := time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC)
	if len(gotP) != 1 || !gotP[0].Time.Equal(want) || gotP[0].Time.Location() != time.UTC || gotP[0].Pa != 11.5 {
		t.Errorf("observed pressure %+v, want 11.5 Pa at %s UTC", gotP, want)
	}
	// A programmatic submission gets the same validation as HTTP.
	bad := mustRaw(t, good)
	bad.Counts["1"] = Count{N: 1 << 54}
	_, err = in.SubmitReadings(context.Background(), []RawReading{mustRaw(t, good), bad})
	var ie *InputError
	if !errors.As(err, &ie) || ie.Index != 1 || ie.Field != "counts.1" || !errors.Is(err, ErrInput) {
		t.Fatalf("error %v, want InputError at 1, counts.1", err)
	}
	_, err = in.SubmitPressure(context.Background(), []RawPressure{{Sensor: "dp-hood-asm", Time: "2026-03-02T10:00:00Z", Pa: f64(math.NaN())}})
	if !errors.As(err, &ie) || ie.Field != "pa" {
		t.Fatalf("NaN pa: error %v", err)
	}
	if nr, np := sink.stored(); nr != 1 || np != 1 {
		t.Errorf("sink holds %d readings, %d DP samples after refused submissions", nr, np)
	}
}

func TestConcurrentPosts(t *testing.T) {
	sink := newMemSink()
	in := newTestIngest(t, sink, IngestOptions{})
	var mu sync.Mutex
	observed := 0
	in.OnReadings(func(rs []Reading) {
		mu.Lock()
		observed += len(rs)
		mu.Unlock()
	})
	srv := serve(t, in)
	const workers, posts, per = 4, 5, 10
	var wg sync.WaitGroup
	errs := make(chan string, workers*posts)
	for w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for p := range posts {
				var b strings.Builder
				for k := range per {
					// A distinct second within the hour before testNow per reading.
					sec := (w*posts+p)*per + k
					tm := testNow.Add(-time.Hour + time.Duration(sec)*time.Second).Format(time.RFC3339)
					b.WriteString(strings.Replace(good, "2026-03-02T10:00:00Z", tm, 1) + "\n")
				}
				a, err := tryPost(srv, http.MethodPost, "/api/v1/readings", "application/x-ndjson", strings.NewReader(b.String()))
				if err != nil || a.status != 200 || a.body["accepted"] != float64(per) {
					errs <- fmt.Sprint(a.raw, err)
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Error(e)
	}
	if nr, _ := sink.stored(); nr != workers*posts*per || observed != nr {
		t.Errorf("stored %d, observed %d, want %d", nr, observed, workers*posts*per)
	}
}
