package web

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"net/http"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/report"
)

// certifyReport is GET /certify/report?zone=&from=&to=[&format=html|json|pdf]:
// the certification of stored samples as a file to keep, either the
// report `cleanmon certify --format html` writes or the classification
// JSON itself.
//
// The verdict is not computed here: the API's certification of stored
// readings (Certifier) gives its answer, which is rendered, so that the
// page, the API and the report cannot disagree. An error answer is passed
// on as it is. The HTML report names the SHA-256 of the JSON answer it was
// made from, which is the file format=json gives for the same query.
func (s *Server) certifyReport(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	zone, from, to, format := q.Get("zone"), q.Get("from"), q.Get("to"), q.Get("format")
	for _, p := range []struct{ name, v, want string }{
		{"zone", zone, "the zone id"},
		{"from", from, "the period's start, RFC 3339"},
		{"to", to, "the period's end, RFC 3339"},
	} {
		if p.v == "" {
			httpx.WriteFieldError(w, p.name, "missing: give "+p.want)
			return
		}
	}
	switch format {
	case "", "html", "json", "pdf":
	default:
		httpx.WriteFieldError(w, "format", fmt.Sprintf("%q: want html, json or pdf", format))
		return
	}

	status, body, rep := s.certify.CertifyStored(r.Context(), zone, from, to)
	if rep == nil {
		httpx.WriteRaw(w, status, body)
		return
	}

	// The certification accepted both times, so they parse.
	tf, _ := time.Parse(time.RFC3339Nano, from)
	tt, _ := time.Parse(time.RFC3339Nano, to)
	name := fmt.Sprintf("certification-%s-%s-%s", zone, tf.UTC().Format("20060102T1504Z"), tt.UTC().Format("20060102T1504Z"))
	if format == "json" {
		w.Header().Set("Content-Type", "application/json")
		w.Header().Set("Content-Disposition", `attachment; filename="`+name+`.json"`)
		w.Header().Set("Cache-Control", "no-store")
		w.WriteHeader(http.StatusOK)
		w.Write(body)
		return
	}

	sum := sha256.Sum256(body)
	zname := zone
	if z, ok := s.cfg.Zone(zone); ok && z.Name != "" {
		zname = z.Name + " (" + zone + ")"
	}
	out := report.Certification{
		Report: *rep, Site: s.cfg.Site, Zone: zname, Date: s.now().UTC().Format("2006-01-02"),
		SamplesFile: fmt.Sprintf("stored readings %s – %s UTC; classification JSON of GET /api/v1/zones/%s/classification",
			tf.UTC().Format("2006-01-02 15:04:05"), tt.UTC().Format("2006-01-02 15:04:05"), zone),
		SamplesSHA256: hex.EncodeToString(sum[:]),
		Signatures:    s.reportSignaturesFor(reportSubject(zone, from, to), body),
	}
	t := classify.Target{State: rep.State, Edition: rep.Edition, AreaM2: rep.AreaM2}
	if rep.Class != nil {
		t.Class = *rep.Class
	}
	if rep.Grade != nil {
		t.Grade = *rep.Grade
	}
	var b bytes.Buffer
	if format == "pdf" {
		if err := report.WritePDF(&b, t, out); err != nil {
			s.log.Error("certification report not rendered", "zone", zone, "err", err)
			httpx.WriteError(w, http.StatusInternalServerError, "certification report could not be rendered: "+err.Error())
			return
		}
		w.Header().Set("Content-Type", "application/pdf")
		w.Header().Set("Content-Disposition", `attachment; filename="`+name+`.pdf"`)
		w.Header().Set("Cache-Control", "no-store")
		w.WriteHeader(http.StatusOK)
		w.Write(b.Bytes())
		return
	}
	if err := report.WriteHTML(&b, t, out); err != nil {
		s.log.Error("certification report not rendered", "zone", zone, "err", err)
		httpx.WriteError(w, http.StatusInternalServerError, "certification report could not be rendered: "+err.Error())
		return
	}
	// The report is a document with its own style block and no script;
	// the policy allows exactly that block, by its hash.
	w.Header().Set("Content-Security-Policy", report.CSP)
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Content-Disposition", `attachment; filename="`+name+`.html"`)
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(http.StatusOK)
	w.Write(report.WithSignatures(b.Bytes(), s.reportSignatureLines(reportSubject(zone, from, to), body)))
}
