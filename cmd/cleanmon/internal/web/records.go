package web

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"net/http"
	"regexp"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/report"
)

// Records gives the exposure of a run and a zone's month exactly as the
// API answers them (the api server is one): the status and the body. The
// reports render that answer, so the page, the API and the signed
// document cannot disagree.
type Records interface {
	ExposureJSON(ctx context.Context, id string) (int, []byte)
	TrendJSON(ctx context.Context, zone, month string) (int, []byte)
}

// registerRecords mounts the investigation, exposure and trend pages and
// the two reports.
func (s *Server) registerRecords(r chi.Router, static func(string, http.HandlerFunc), long, read func(http.Handler) http.Handler) {
	static("/alarms/{id}/investigation", servePage("investigation.html"))
	static("/runs/{id}", servePage("run.html"))
	static("/zones/{zone}/trend", s.trendPage)
	r.With(long, read).Get("/runs/{id}/report", s.exposureReport)
	r.With(long, read).Get("/zones/{zone}/trend/report", s.trendReport)
}

func (s *Server) trendPage(w http.ResponseWriter, r *http.Request) {
	if _, ok := s.cfg.Zone(chi.URLParam(r, "zone")); !ok {
		s.zonePage(w, r) // the same 404 page
		return
	}
	webPages["trend.html"].serve(w, r)
}

// fileName keeps a download name to safe characters.
var unsafeName = regexp.MustCompile(`[^A-Za-z0-9._-]+`)

func reportFormat(w http.ResponseWriter, r *http.Request) (string, bool) {
	f := r.URL.Query().Get("format")
	switch f {
	case "":
		return "html", true
	case "html", "pdf", "json":
		return f, true
	}
	httpx.WriteFieldError(w, "format", fmt.Sprintf("%q: want html, pdf or json", f))
	return "", false
}

// sendReport writes a rendered report as a download; the HTML form gets
// the report's own strict policy and names the SHA-256 of the JSON it was
// made from in a header.
func sendReport(w http.ResponseWriter, format, name, csp string, src []byte, body []byte) {
	sum := sha256.Sum256(src)
	w.Header().Set("X-Cleanmon-Source-SHA256", hex.EncodeToString(sum[:]))
	switch format {
	case "pdf":
		w.Header().Set("Content-Type", "application/pdf")
	case "json":
		w.Header().Set("Content-Type", "application/json")
	default:
		w.Header().Set("Content-Security-Policy", csp)
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
	}
	w.Header().Set("Content-Disposition", `attachment; filename="`+unsafeName.ReplaceAllString(name, "_")+"."+format+`"`)
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(http.StatusOK)
	w.Write(body)
}

// exposureReport is GET /runs/{id}/report?format=html|pdf|json: the
// exposure of a run as a document a QA reviewer signs.
func (s *Server) exposureReport(w http.ResponseWriter, r *http.Request) {
	format, ok := reportFormat(w, r)
	if !ok {
		return
	}
	status, src := s.records.ExposureJSON(r.Context(), chi.URLParam(r, "id"))
	if status != http.StatusOK {
		httpx.WriteRaw(w, status, src)
		return
	}
	var e report.Exposure
	if err := json.Unmarshal(src, &e); err != nil {
		httpx.WriteError(w, http.StatusInternalServerError, "exposure report: "+err.Error())
		return
	}
	var b bytes.Buffer
	var err error
	switch format {
	case "pdf":
		err = report.WriteExposurePDF(&b, e)
	case "json":
		b.Write(src)
	default:
		err = report.WriteExposureHTML(&b, e)
	}
	if err != nil {
		s.log.Error("exposure report not rendered", "run", e.Run.ID, "err", err)
		httpx.WriteError(w, http.StatusInternalServerError, "exposure report could not be rendered: "+err.Error())
		return
	}
	sendReport(w, format, "exposure-"+e.Run.ID, report.ExposureCSP, src, b.Bytes())
}

// trendReport is GET /zones/{zone}/trend/report?month=2026-03&format=html|pdf|json.
func (s *Server) trendReport(w http.ResponseWriter, r *http.Request) {
	format, ok := reportFormat(w, r)
	if !ok {
		return
	}
	status, src := s.records.TrendJSON(r.Context(), chi.URLParam(r, "zone"), r.URL.Query().Get("month"))
	if status != http.StatusOK {
		httpx.WriteRaw(w, status, src)
		return
	}
	var t report.Trend
	if err := json.Unmarshal(src, &t); err != nil {
		httpx.WriteError(w, http.StatusInternalServerError, "trend report: "+err.Error())
		return
	}
	var b bytes.Buffer
	var err error
	switch format {
	case "pdf":
		err = report.WriteTrendPDF(&b, t)
	case "json":
		b.Write(src)
	default:
		err = report.WriteTrendHTML(&b, t)
	}
	if err != nil {
		s.log.Error("trend report not rendered", "zone", t.Zone, "err", err)
		httpx.WriteError(w, http.StatusInternalServerError, "trend report could not be rendered: "+err.Error())
		return
	}
	sendReport(w, format, "trend-"+t.Zone+"-"+t.Month, report.TrendCSP, src, b.Bytes())
}
