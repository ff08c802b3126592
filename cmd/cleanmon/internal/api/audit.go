package api

import (
	"context"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"net/http"
	"strconv"
	"strings"
	"time"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// auditJSON is one entry of GET /api/v1/audit. Detail is always readable
// text: the store's binary encodings are spelt out (store.ReadableDetail).
type auditJSON struct {
	Seq     uint64    `json:"seq"`
	Time    time.Time `json:"time"`
	Actor   string    `json:"actor"`
	Action  string    `json:"action"`
	Subject string    `json:"subject"`
	Reason  string    `json:"reason"`
	Detail  string    `json:"detail,omitempty"`
	// Covers names the counters, sensors or zones a batch entry covers.
	Covers []string `json:"covers,omitempty"`
	Hash   string   `json:"hash"`
}

// auditFilter is the query of GET /api/v1/audit.
type auditFilter struct {
	from, to    time.Time
	who, action string
	zone        string
	zoneSeries  map[string]bool // the zone's counters and DP sensors
	csv         bool
	fromSeq     uint64
}

// parseAuditFilter reads who, action, zone, format and from/to; false
// when it has answered with a 400.
func (s *Server) parseAuditFilter(w http.ResponseWriter, r *http.Request) (auditFilter, bool) {
	var f auditFilter
	var ok bool
	if f.from, f.to, ok = s.queryRange(w, r); !ok {
		return f, false
	}
	q := r.URL.Query()
	f.who, f.action, f.zone = strings.TrimSpace(q.Get("who")), strings.TrimSpace(q.Get("action")), strings.TrimSpace(q.Get("zone"))
	switch q.Get("format") {
	case "", "json":
	case "csv":
		f.csv = true
	default:
		httpx.WriteFieldError(w, "format", fmt.Sprintf("%q: want json or csv", q.Get("format")))
		return f, false
	}
	if f.zone != "" {
		if _, known := s.cfg.Zone(f.zone); !known {
			httpx.WriteFieldError(w, "zone", fmt.Sprintf("unknown zone %q", f.zone))
			return f, false
		}
		f.zoneSeries = map[string]bool{f.zone: true}
		for _, k := range s.cfg.Counters {
			if k.Zone == f.zone {
				f.zoneSeries[k.ID] = true
			}
		}
		for _, p := range s.cfg.PressureSensors {
			if p.High == f.zone || p.Low == f.zone {
				f.zoneSeries[p.ID] = true
			}
		}
	}
	return f, true
}

// scan calls fn with each entry that passes f and its readable detail,
// starting near the first entry of f.from rather than at entry #1: after
// a few years the chain holds millions of ingest covers. The detail is
// decoded only for an entry the cheaper filters kept.
func (f *auditFilter) scan(ctx context.Context, st AuditTrail, fn func(e *store.AuditEntry, d store.AuditDetail) error) error {
	return st.ScanAuditSince(f.from, func(e store.AuditEntry) error {
		if !f.matchEntry(&e) {
			return ctx.Err()
		}
		d := store.ReadableDetail(e)
		if !f.matchZone(&e, d) {
			return ctx.Err()
		}
		return fn(&e, d)
	})
}

// matchEntry reports whether e passes the filters on time, action and
// who. who matches the actor as a whole word (a token's name, an account
// name, or the account name in "Full Name (name)"), case-insensitively.
func (f *auditFilter) matchEntry(e *store.AuditEntry) bool {
	if e.Time.Before(f.from) || !e.Time.Before(f.to) {
		return false
	}
	if f.action != "" && e.Action != f.action {
		return false
	}
	return f.who == "" || hasWord(e.Actor, f.who)
}

// matchZone reports whether e, with its decoded detail, concerns the
// zone asked for (any entry when none was).
func (f *auditFilter) matchZone(e *store.AuditEntry, d store.AuditDetail) bool {
	if f.zone == "" {
		return true
	}
	for _, n := range d.Names {
		if f.zoneSeries[n] {
			return true
		}
	}
	for _, w := range subjectWords(e.Subject) {
		if f.zoneSeries[w] {
			return true
		}
	}
	return false
}

// hasWord reports whether want is one of the words of s.
func hasWord(s, want string) bool {
	for _, w := range strings.FieldsFunc(s, func(r rune) bool { return r == ' ' || r == '(' || r == ')' }) {
		if strings.EqualFold(w, want) {
			return true
		}
	}
	return strings.EqualFold(s, want)
}

// subjectWords splits a subject like "assembly: in-operation" or
// "alarm assembly:pc-asm-1:0.5:excursion:…" into its words.
func subjectWords(s string) []string {
	return strings.FieldsFunc(s, func(r rune) bool { return r == ' ' || r == ':' || r == ',' })
}

// listAudit is GET /api/v1/audit?from=&to=&who=&action=&zone=&format=json|csv
// (from/to RFC 3339, default the last 24 h): the entries that pass every
// filter, in chain order, streamed, with readable details. Readable with
// the viewer role: the trail holds who did what, not secrets, and an
// inspector must be able to read it without power to change anything.
func (s *Server) listAudit(w http.ResponseWriter, r *http.Request) {
	f, ok := s.parseAuditFilter(w, r)
	if !ok {
		return
	}
	if f.csv {
		s.listAuditCSV(w, r, &f)
		return
	}
	rs := httpx.NewRowStream(w, Errors)
	err := f.scan(r.Context(), s.store, func(e *store.AuditEntry, d store.AuditDetail) error {
		j := auditJSON{Seq: e.Seq, Time: e.Time.UTC(), Actor: e.Actor, Action: e.Action, Subject: e.Subject, Reason: e.Reason,
			Detail: d.Text, Covers: d.Names, Hash: hex.EncodeToString(e.Hash[:])}
		// Audit answers are small beside readings: encoding/json is fine.
		enc, err := json.Marshal(j)
		if err != nil {
			return err
		}
		return rs.Row(func(b []byte) []byte { return append(b, enc...) })
	})
	if err != nil {
		rs.Fail(err)
		return
	}
	rs.End()
}

// auditCSVHeader are the columns of the audit trail as CSV.
var auditCSVHeader = []string{"seq", "time", "actor", "action", "subject", "reason", "detail", "hash"}

// listAuditCSV writes the filtered entries as CSV, a file for QA to keep.
// A failure midway is written as a last row starting "# error", so a cut
// file cannot pass for a whole one.
func (s *Server) listAuditCSV(w http.ResponseWriter, r *http.Request, f *auditFilter) {
	w.Header().Set("Content-Type", "text/csv; charset=utf-8")
	w.Header().Set("Content-Disposition", fmt.Sprintf(`attachment; filename="audit-%s-%s.csv"`,
		f.from.UTC().Format("20060102T1504Z"), f.to.UTC().Format("20060102T1504Z")))
	w.Header().Set("Cache-Control", "no-store")
	cw := csv.NewWriter(w)
	cw.Write(auditCSVHeader)
	err := f.scan(r.Context(), s.store, func(e *store.AuditEntry, d store.AuditDetail) error {
		cw.Write([]string{strconv.FormatUint(e.Seq, 10), e.Time.UTC().Format(time.RFC3339Nano), e.Actor, e.Action,
			e.Subject, e.Reason, d.Text, hex.EncodeToString(e.Hash[:])})
		return cw.Error()
	})
	if err != nil {
		cw.Write([]string{"# error", err.Error()})
		s.log.Error("audit CSV cut short", "err", err)
	}
	cw.Flush()
}

// auditHead is GET /api/v1/audit/head: the chain's last sequence number
// and hash, for an outside system to keep.
func (s *Server) auditHead(w http.ResponseWriter, r *http.Request) {
	seq, h, err := s.store.AuditHead()
	if err != nil {
		httpx.WriteError(w, Errors.Status(err), err.Error())
		return
	}
	httpx.WriteJSON(w, http.StatusOK, map[string]any{"seq": seq, "hash": hex.EncodeToString(h[:])})
}
