package web

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/site"
)

// fakeRecords has no run and no month: every report is a 404 as the API
// gives it.
type fakeRecords struct{}

func (fakeRecords) ExposureJSON(context.Context, string) (int, []byte) {
	return http.StatusNotFound, []byte(`{"error":"store: not found: run"}`)
}

func (fakeRecords) TrendJSON(context.Context, string, string) (int, []byte) {
	return http.StatusNotFound, []byte(`{"error":"store: not found: zone"}`)
}

// TestRecordReportRoutes: a bad format is a 400 naming it, an answer of
// the API that is not a 200 passes through unchanged, and a zone the site
// does not have gets the 404 page.
func TestRecordReportRoutes(t *testing.T) {
	cfg, err := site.Load("site.yaml", []byte(pageSite+"access: {open_reads: true}\n"))
	if err != nil {
		t.Fatal(err)
	}
	auth, err := access.NewAuthorizer(cfg.Access, false)
	if err != nil {
		t.Fatal(err)
	}
	r := chi.NewRouter()
	New(Options{Site: cfg, Store: fakePressure{}, Certify: fakeCertifier{}, Records: fakeRecords{}, Access: auth,
		Log: slog.New(slog.NewTextHandler(io.Discard, nil)), Now: time.Now}).Register(r)
	d := &pageServer{t: t, h: r}
	for _, c := range []struct {
		path string
		code int
		has  string
	}{
		{"/runs/LOT-1/report?format=docx", 400, `"field":"format"`},
		{"/runs/LOT-1/report?format=pdf", 404, "store: not found: run"},
		{"/zones/hood/trend/report?month=2026-02", 404, "store: not found: zone"},
		{"/zones/attic/trend", 404, "No such zone"},
	} {
		code, _, body := d.do("GET", c.path, "", "", nil)
		if code != c.code || !strings.Contains(string(body), c.has) {
			t.Errorf("GET %s: %d %s, want %d with %q", c.path, code, body, c.code, c.has)
		}
	}
}
