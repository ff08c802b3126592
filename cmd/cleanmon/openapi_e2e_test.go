package main

import (
	"bytes"
	"context"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/getkin/kin-openapi/openapi3filter"
	"github.com/getkin/kin-openapi/routers/legacy"
)

// TestOpenAPIValidatesRealAnswers runs the demo daemon and validates its
// real answers, successes and refusals, against the schemas of the
// description it serves at /api/v1/openapi.json (kin-openapi, an outside
// validator of OpenAPI 3.1 with JSON Schema 2020-12).
func TestOpenAPIValidatesRealAnswers(t *testing.T) {
	d := startDaemon(t, "--demo")
	code, spec, err := apiDo(context.Background(), http.MethodGet, d.url+"/api/v1/openapi.json", nil, "")
	if err != nil || code != 200 {
		t.Fatalf("GET /api/v1/openapi.json: %d %v", code, err)
	}
	doc, err := openapi3.NewLoader().LoadFromData(spec)
	if err != nil {
		t.Fatal(err)
	}
	if err := doc.Validate(context.Background()); err != nil {
		t.Fatal(err)
	}
	// The description names no host ("/"): the daemon's own is the server.
	doc.Servers = openapi3.Servers{{URL: d.url}}
	router, err := legacy.NewRouter(doc)
	if err != nil {
		t.Fatal(err)
	}
	// The validator does refuse what does not match: an ingest answer
	// without its duplicates count.
	{
		req, _ := http.NewRequest(http.MethodPost, d.url+"/api/v1/readings", nil)
		route, params, err := router.FindRoute(req)
		if err != nil {
			t.Fatal(err)
		}
		err = openapi3filter.ValidateResponse(context.Background(), &openapi3filter.ResponseValidationInput{
			RequestValidationInput: &openapi3filter.RequestValidationInput{Request: req, PathParams: params, Route: route},
			Status:                 200, Header: http.Header{"Content-Type": {"application/json"}},
			Body: io.NopCloser(strings.NewReader(`{"accepted":1}`)), Options: &openapi3filter.Options{IncludeResponseStatus: true},
		})
		if err == nil || !strings.Contains(err.Error(), "duplicates") {
			t.Fatalf("an answer without duplicates validated: %v", err)
		}
	}
	// Wait for the demo's backfill to reach the environment sensors.
	waitUntil(t, "the demo's history", 60*time.Second, func() bool {
		_, b, err := apiDo(context.Background(), http.MethodGet, d.url+"/api/v1/environment", nil, "")
		return err == nil && bytes.Contains(b, []byte(`"state":"ok"`))
	})
	now := time.Now().UTC()
	ago := func(d time.Duration) string { return now.Add(-d).Format(time.RFC3339) }
	stamp := now.Add(-30 * time.Second).Format(time.RFC3339)
	cases := []struct {
		method, path, ctype, body string
		status                    int
	}{
		{"GET", "/healthz", "", "", 200},
		{"GET", "/readyz", "", "", 200},
		{"GET", "/metrics", "", "", 200},
		{"GET", "/api/v1/openapi.json", "", "", 200},
		{"GET", "/api/v1/zones", "", "", 200},
		{"GET", "/api/v1/zones/assembly", "", "", 200},
		{"GET", "/api/v1/zones/nowhere", "", "", 404},
		{"GET", "/api/v1/zones/assembly/readings?from=" + ago(5*time.Minute), "", "", 200},
		{"GET", "/api/v1/zones/assembly/readings?step=1h&from=" + ago(3*time.Hour), "", "", 200},
		{"GET", "/api/v1/zones/assembly/readings?format=csv&from=" + ago(5*time.Minute), "", "", 200},
		{"GET", "/api/v1/zones/assembly/readings?from=yesterday", "", "", 400},
		{"GET", "/api/v1/zones/assembly/classification?from=" + ago(time.Hour), "", "", 200},
		{"GET", "/api/v1/zones/assembly/levels", "", "", 200},
		{"GET", "/api/v1/alarms?state=all", "", "", 200},
		{"GET", "/api/v1/alarms", "", "", 200},
		{"GET", "/api/v1/sensors", "", "", 200},
		{"GET", "/api/v1/sensors/dp-asm/pressure?from=" + ago(time.Minute), "", "", 200},
		{"GET", "/api/v1/environment", "", "", 200},
		{"GET", "/api/v1/environment?zone=assembly", "", "", 200},
		{"GET", "/api/v1/sensors/th-asm/environment?from=" + ago(10*time.Minute), "", "", 200},
		{"GET", "/api/v1/sensors/th-asm/environment?step=1h&from=" + ago(3*time.Hour), "", "", 200},
		{"GET", "/api/v1/sensors/th-nowhere/environment", "", "", 404},
		{"GET", "/api/v1/audit?from=" + ago(time.Hour), "", "", 200},
		{"GET", "/api/v1/audit/head", "", "", 200},
		{"GET", "/api/v1/runs", "", "", 200},
		{"GET", "/api/v1/zones/assembly/trend", "", "", 200},
		{"POST", "/api/v1/environment", "", `{"sensor":"th-asm","time":"` + stamp + `","temperature_c":21.2,"humidity_pct":44.0}`, 200},
		{"POST", "/api/v1/environment", "application/json", `{"sensor":"av-hood","time":"` + stamp + `","velocity_m_s":0.45,"velocity_m_s":0.5}`, 400},
		{"POST", "/api/v1/pressure", "application/json", `{"sensor":"dp-asm","time":"` + stamp + `","pa":12.4}`, 200},
		{"POST", "/api/v1/readings", "application/x-ndjson", `{"counter":"pc-asm-1","time":"` + stamp + `","volume_l":28.3,"counts":{"0.3":1200,"0.5":310,"1":80,"5":2}}`, 200},
		{"POST", "/api/v1/readings", "text/plain", `{}`, 415},
		{"PUT", "/api/v1/zones/gowning/state", "application/json", `{"state":"at-rest","reason":"after cleaning","by":"shift lead"}`, 200},
		{"POST", "/api/v1/alarms/no-such-alarm/ack", "application/json", `{"comment":"checked","by":"shift lead"}`, 404},
	}
	for _, c := range cases {
		t.Run(c.method+" "+c.path, func(t *testing.T) {
			req, err := http.NewRequest(c.method, d.url+c.path, strings.NewReader(c.body))
			if err != nil {
				t.Fatal(err)
			}
			if c.ctype != "" {
				req.Header.Set("Content-Type", c.ctype)
			}
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			body, err := io.ReadAll(resp.Body)
			resp.Body.Close()
			if err != nil {
				t.Fatal(err)
			}
			if resp.StatusCode != c.status {
				t.Fatalf("%d, want %d: %s", resp.StatusCode, c.status, body)
			}
			route, params, err := router.FindRoute(req)
			if err != nil {
				t.Fatalf("not described: %v", err)
			}
			in := &openapi3filter.ResponseValidationInput{
				RequestValidationInput: &openapi3filter.RequestValidationInput{Request: req, PathParams: params, Route: route},
				Status:                 resp.StatusCode,
				Header:                 resp.Header,
				Body:                   io.NopCloser(bytes.NewReader(body)),
				Options:                &openapi3filter.Options{IncludeResponseStatus: true, MultiError: true},
			}
			if err := openapi3filter.ValidateResponse(context.Background(), in); err != nil {
				t.Errorf("the answer does not match the description: %v\n%.600s", err, body)
			}
		})
	}
}
