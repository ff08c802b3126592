package api

import (
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"net/http"
	"time"
	"unicode"
	"unicode/utf8"
)

// auditJSON is one entry of GET /api/v1/audit.
type auditJSON struct {
	Seq     uint64    `json:"seq"`
	Time    time.Time `json:"time"`
	Actor   string    `json:"actor"`
	Action  string    `json:"action"`
	Subject string    `json:"subject"`
	Reason  string    `json:"reason"`
	// Detail is the entry's detail as text when it is text, else
	// DetailBase64 holds its bytes (the store's own encodings).
	Detail       string `json:"detail,omitempty"`
	DetailBase64 string `json:"detail_base64,omitempty"`
	Hash         string `json:"hash"`
}

func printable(b []byte) bool {
	if !utf8.Valid(b) {
		return false
	}
	for _, r := range string(b) {
		if !unicode.IsPrint(r) && r != '\n' && r != '\t' {
			return false
		}
	}
	return true
}

// listAudit is GET /api/v1/audit?from=&to= (RFC 3339, default the last
// 24 h): the entries in that time range, in chain order, streamed. Readable
// with the viewer role: the trail holds who did what, not secrets, and an
// inspector must be able to read it without power to change anything.
func (s *Server) listAudit(w http.ResponseWriter, r *http.Request) {
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	rs := httpx.NewRowStream(w, Errors)
	err := s.store.ScanAudit(0, 0, func(e store.AuditEntry) error {
		if e.Time.Before(from) || !e.Time.Before(to) {
			return r.Context().Err()
		}
		j := auditJSON{Seq: e.Seq, Time: e.Time.UTC(), Actor: e.Actor, Action: e.Action, Subject: e.Subject, Reason: e.Reason, Hash: hex.EncodeToString(e.Hash[:])}
		if printable(e.Detail) {
			j.Detail = string(e.Detail)
		} else {
			j.DetailBase64 = base64.StdEncoding.EncodeToString(e.Detail)
		}
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
