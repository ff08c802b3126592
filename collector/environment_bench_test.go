package collector

import (
	"fmt"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"
)

// BenchmarkEnvironmentIngestNDJSON posts 1 000 T/RH samples as NDJSON
// through the handler, decode, validation and an in-memory store.
func BenchmarkEnvironmentIngestNDJSON(b *testing.B) {
	var body strings.Builder
	base := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	for i := range 1000 {
		fmt.Fprintf(&body, `{"sensor":"th-asm","time":%q,"temperature_c":21.%d,"humidity_pct":44.%d}`+"\n", base.Add(time.Duration(i)*time.Second).Format(time.RFC3339), i%10, i%7)
	}
	payload := body.String()
	reg := demoEnvRegistry(b)
	b.SetBytes(int64(len(payload)))
	b.ReportAllocs()
	for b.Loop() {
		in := NewEnvironmentIngest(reg, newMemEnvSink(), IngestOptions{Now: func() time.Time { return testNow }})
		req := httptest.NewRequest(http.MethodPost, "/api/v1/environment", strings.NewReader(payload))
		req.Header.Set("Content-Type", "application/x-ndjson")
		rec := httptest.NewRecorder()
		in.ServeHTTP(rec, req)
		if rec.Code != http.StatusOK {
			b.Fatalf("%d %s", rec.Code, rec.Body)
		}
	}
}
