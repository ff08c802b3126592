package collector

import (
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
)

// TestStrictOverHTTP posts bodies with repeated and case-variant keys to
// the real handlers: 400 naming the field and the element, nothing stored.
func TestStrictOverHTTP(t *testing.T) {
	cases := []struct {
		route, ctype, body, field string
		index                     int
	}{
		{"pressure", "", `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12,"pa":-50}`, "pa", 0},
		{"readings", "application/json", `[` + good + `,{"counter":"pc-asm-1","counter":"pc-asm-2","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.5":1,"1":0,"5":0}}]`, "counter", 1},
		{"readings", "application/x-ndjson", good + "\n" + strings.Replace(good, `"volume_l"`, `"Volume_L"`, 1), "Volume_L", 1},
		{"pressure", "application/json", `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":1e300}`, "pa", 0},
	}
	for _, c := range cases {
		t.Run(c.route+"/"+c.field, func(t *testing.T) {
			sink := newMemSink()
			in := newTestIngest(t, sink, IngestOptions{})
			h := in.Readings
			if c.route == "pressure" {
				h = in.Pressure
			}
			srv := httptest.NewServer(http.HandlerFunc(h))
			defer srv.Close()
			req, err := http.NewRequest(http.MethodPost, srv.URL, strings.NewReader(c.body))
			if err != nil {
				t.Fatal(err)
			}
			if c.ctype != "" {
				req.Header.Set("Content-Type", c.ctype)
			}
			resp, err := srv.Client().Do(req)
			if err != nil {
				t.Fatal(err)
			}
			defer resp.Body.Close()
			var got struct {
				Error string `json:"error"`
				Index *int   `json:"index"`
				Field string `json:"field"`
			}
			if err := json.NewDecoder(resp.Body).Decode(&got); err != nil {
				t.Fatal(err)
			}
			if resp.StatusCode != http.StatusBadRequest || got.Field != c.field || got.Index == nil || *got.Index != c.index {
				t.Fatalf("%d %+v, want 400 naming %s at %d", resp.StatusCode, got, c.field, c.index)
			}
			if m := goNames.FindString(got.Error); m != "" {
				t.Errorf("message shows %q: %s", m, got.Error)
			}
			if r, p := sink.stored(); r+p != 0 {
				t.Errorf("%d readings and %d samples stored from a refused body", r, p)
			}
		})
	}
}
