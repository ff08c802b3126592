package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/classify"
)

// certifyReport is GET /certify/report?zone=&from=&to=[&format=html|json]:
// the certification of stored samples as a file to keep, either the
// report `cleanmon certify --format html` writes or the classification
// JSON itself.
//
// The verdict is not computed here: the API's classification handler is
// run in-process and its answer rendered, so that the page, the API and
// the report cannot disagree. An error answer of that handler is passed
// on as it is. The HTML report names the SHA-256 of the JSON answer it was
// made from, which is the file format=json gives for the same query.
func (s *server) certifyReport(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	zone, from, to, format := q.Get("zone"), q.Get("from"), q.Get("to"), q.Get("format")
	for _, p := range []struct{ name, v, want string }{
		{"zone", zone, "the zone id"},
		{"from", from, "the period's start, RFC 3339"},
		{"to", to, "the period's end, RFC 3339"},
	} {
		if p.v == "" {
			writeFieldError(w, p.name, "missing: give "+p.want)
			return
		}
	}
	switch format {
	case "", "html", "json":
	default:
		writeFieldError(w, "format", fmt.Sprintf("%q: want html or json", format))
		return
	}

	inner := r.Clone(r.Context())
	inner.URL.RawQuery = url.Values{"from": {from}, "to": {to}}.Encode()
	rctx := chi.NewRouteContext()
	rctx.URLParams.Add("zone", zone)
	inner = inner.WithContext(context.WithValue(inner.Context(), chi.RouteCtxKey, rctx))
	ans := &bufferedAnswer{header: http.Header{}}
	s.zoneClassification(ans, inner)
	if ans.status != http.StatusOK {
		ans.copyTo(w)
		return
	}

	// The inner handler accepted both times, so they parse.
	tf, _ := time.Parse(time.RFC3339Nano, from)
	tt, _ := time.Parse(time.RFC3339Nano, to)
	name := fmt.Sprintf("certification-%s-%s-%s", zone, tf.UTC().Format("20060102T1504Z"), tt.UTC().Format("20060102T1504Z"))
	if format == "json" {
		w.Header().Set("Content-Type", "application/json")
		w.Header().Set("Content-Disposition", `attachment; filename="`+name+`.json"`)
		w.Header().Set("Cache-Control", "no-store")
		w.WriteHeader(http.StatusOK)
		w.Write(ans.body.Bytes())
		return
	}

	var rep classify.Report
	if err := json.Unmarshal(ans.body.Bytes(), &rep); err != nil {
		s.log.Error("classification answer not readable for the report", "zone", zone, "err", err)
		writeError(w, http.StatusInternalServerError, "classification answer could not be read for the report")
		return
	}
	sum := sha256.Sum256(ans.body.Bytes())
	zname := zone
	if z, ok := s.cfg.zone(zone); ok && z.Name != "" {
		zname = z.Name + " (" + zone + ")"
	}
	out := certifyOut{
		Report: rep, Site: s.cfg.Site, Zone: zname, Date: s.now().UTC().Format("2006-01-02"),
		SamplesFile: fmt.Sprintf("stored readings %s – %s UTC; classification JSON of GET /api/v1/zones/%s/classification",
			tf.UTC().Format("2006-01-02 15:04:05"), tt.UTC().Format("2006-01-02 15:04:05"), zone),
		SamplesSHA256: hex.EncodeToString(sum[:]),
	}
	t := classify.Target{State: rep.State, Edition: rep.Edition, AreaM2: rep.AreaM2}
	if rep.Class != nil {
		t.Class = *rep.Class
	}
	if rep.Grade != nil {
		t.Grade = *rep.Grade
	}
	var b bytes.Buffer
	if err := writeHTMLReport(&b, t, out); err != nil {
		s.log.Error("certification report not rendered", "zone", zone, "err", err)
		writeError(w, http.StatusInternalServerError, "certification report could not be rendered: "+err.Error())
		return
	}
	// The report is a document with its own style block and no script;
	// the policy allows exactly that block, by its hash.
	w.Header().Set("Content-Security-Policy", reportCSP)
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Content-Disposition", `attachment; filename="`+name+`.html"`)
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(http.StatusOK)
	w.Write(b.Bytes())
}

// reportCSP is the policy of the downloaded report: nothing runs, nothing
// loads, and the one style block of report.html.tmpl applies.
var reportCSP = "default-src 'none'; style-src " + styleHashes(reportTemplate) +
	"; img-src data:; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"

// styleHashes returns the CSP hash sources of the <style> blocks of a
// document, or 'none' when it has none.
func styleHashes(doc string) string {
	var out []string
	for {
		_, rest, ok := strings.Cut(doc, "<style>")
		if !ok {
			break
		}
		css, after, ok := strings.Cut(rest, "</style>")
		if !ok {
			break
		}
		sum := sha256.Sum256([]byte(css))
		out = append(out, "'sha256-"+base64.StdEncoding.EncodeToString(sum[:])+"'")
		doc = after
	}
	if len(out) == 0 {
		return "'none'"
	}
	return strings.Join(out, " ")
}

// bufferedAnswer holds a handler's answer in memory, for an in-process
// call of an API handler.
type bufferedAnswer struct {
	header http.Header
	status int
	body   bytes.Buffer
}

func (b *bufferedAnswer) Header() http.Header { return b.header }

func (b *bufferedAnswer) WriteHeader(code int) {
	if b.status == 0 {
		b.status = code
	}
}

func (b *bufferedAnswer) Write(p []byte) (int, error) {
	b.WriteHeader(http.StatusOK)
	return b.body.Write(p)
}

// copyTo passes the answer on unchanged.
func (b *bufferedAnswer) copyTo(w http.ResponseWriter) {
	for k, v := range b.header {
		w.Header()[k] = v
	}
	w.WriteHeader(b.status)
	w.Write(b.body.Bytes())
}
