package web

import (
	"errors"
	"fmt"
	"net/http"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/cmd/cleanmon/internal/report"
)

// registerPeople mounts the sign-in, accounts and audit pages and their
// JSON routes, and the signing of certification reports.
func (s *Server) registerPeople(r chi.Router) {
	short := httpx.Timeout(httpx.RequestTimeout)
	long := httpx.Timeout(httpx.StreamTimeout)
	for _, p := range []struct{ path, page string }{{"/signin", "signin.html"}, {"/accounts", "accounts.html"}, {"/audit", "audit.html"}} {
		r.With(short).Get(p.path, servePage(p.page))
		r.With(short).Head(p.path, servePage(p.page))
	}
	admin := s.auth.Require(access.PermAdmin)
	r.With(short, admin).Get("/ui/accounts", s.uiAccounts)
	r.With(short, admin).Post("/ui/accounts", s.uiAccountChange)
	r.With(long, s.auth.Require(access.PermRead)).Get("/ui/audit/status", s.uiAuditStatus)
	r.With(long, s.auth.Require(access.PermRead)).Get("/certify/report/signatures", s.reportSignatures)
	r.With(long, s.auth.Require(access.PermSign)).Post("/certify/report/sign", s.signReport)
}

func (s *Server) uiAccounts(w http.ResponseWriter, r *http.Request) {
	as, err := s.acc.Accounts()
	if err != nil {
		s.errs.Write(w, "reading the accounts: ", err)
		return
	}
	httpx.WriteJSON(w, http.StatusOK, as)
}

// uiAccountChange is POST /ui/accounts: one admin change, recorded under
// the signed-in admin's name (or the admin token's).
func (s *Server) uiAccountChange(w http.ResponseWriter, r *http.Request) {
	var op AccountOp
	if !decodeBody(w, r, 8<<10, &op, func() map[string]string {
		return map[string]string{"op": op.Op, "name": op.Name, "full_name": op.FullName, "role": op.Role, "reason": op.Reason}
	}) {
		return
	}
	id := httpx.IdentityOf(r)
	by := id.User
	if by == "" {
		by = id.Token
	}
	pw, err := s.acc.ManageAccount(r.Context(), by, op)
	if err != nil {
		writePeopleError(w, err)
		return
	}
	out := map[string]string{"name": op.Name, "op": op.Op}
	if pw != "" {
		out["password"] = pw
	}
	w.Header().Set("Cache-Control", "no-store")
	httpx.WriteJSON(w, http.StatusOK, out)
}

// writePeopleError answers an account or signature refusal.
func writePeopleError(w http.ResponseWriter, err error) {
	msg := strings.TrimPrefix(err.Error(), "people: ")
	switch {
	case errors.Is(err, people.ErrInvalid):
		httpx.WriteError(w, http.StatusBadRequest, msg)
	case errors.Is(err, people.ErrExists):
		httpx.WriteError(w, http.StatusConflict, msg)
	case errors.Is(err, people.ErrNotFound):
		httpx.WriteError(w, http.StatusNotFound, msg)
	case errors.Is(err, people.ErrReauth):
		httpx.WriteError(w, http.StatusUnauthorized, msg+": sign in at the identity provider again, then sign")
	case errors.Is(err, people.ErrBadCredentials), errors.Is(err, people.ErrLocked), errors.Is(err, people.ErrDisabled), errors.Is(err, people.ErrSamePerson):
		httpx.WriteError(w, http.StatusForbidden, "not signed: "+msg)
	case errors.Is(err, people.ErrBusy):
		httpx.WriteError(w, http.StatusServiceUnavailable, msg)
	default:
		httpx.WriteError(w, http.StatusInternalServerError, msg)
	}
}

func (s *Server) uiAuditStatus(w http.ResponseWriter, r *http.Request) {
	httpx.WriteJSON(w, http.StatusOK, s.audit.AuditStatus(r.Context()))
}

// reportQuery reads zone, from and to and certifies; the subject names the
// report in its signatures and content is the exact classification JSON
// the HTML report is made from.
func (s *Server) reportQuery(w http.ResponseWriter, r *http.Request, zone, from, to string) (subject string, content []byte, ok bool) {
	status, body, rep := s.certify.CertifyStored(r.Context(), zone, from, to)
	if rep == nil {
		httpx.WriteRaw(w, status, body)
		return "", nil, false
	}
	return reportSubject(zone, from, to), body, true
}

// reportSubject names a report of zone over [from, to) in its signatures.
func reportSubject(zone, from, to string) string {
	tf, _ := time.Parse(time.RFC3339Nano, from)
	tt, _ := time.Parse(time.RFC3339Nano, to)
	return fmt.Sprintf("report %s %s %s", zone, tf.UTC().Format(time.RFC3339), tt.UTC().Format(time.RFC3339))
}

// reportSignature is a signature as the pages show it, with whether it
// signed the report as it reads now.
type reportSignature struct {
	people.Signature
	Matches bool `json:"matches"`
}

func (s *Server) signaturesOf(subject string, content []byte) []reportSignature {
	out := []reportSignature{}
	for _, sig := range s.sigs.SignaturesFor(subject) {
		out = append(out, reportSignature{sig, sig.Matches(content)})
	}
	return out
}

// reportSignatures is GET /certify/report/signatures?zone=&from=&to=.
func (s *Server) reportSignatures(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	subject, content, ok := s.reportQuery(w, r, q.Get("zone"), q.Get("from"), q.Get("to"))
	if !ok {
		return
	}
	httpx.WriteJSON(w, http.StatusOK, s.signaturesOf(subject, content))
}

// signReportRequest is the body of POST /certify/report/sign.
type signReportRequest struct {
	Zone     string `json:"zone"`
	From     string `json:"from"`
	To       string `json:"to"`
	Meaning  string `json:"meaning"`
	Password string `json:"password"`
}

// signReport is POST /certify/report/sign: a signed-in person signs the
// report of a zone and period as performed, reviewed or approved. The
// signature covers the classification JSON the HTML report is made from;
// an approval by the person who signed it as performed is refused.
func (s *Server) signReport(w http.ResponseWriter, r *http.Request) {
	var req signReportRequest
	if !decodeBody(w, r, 8<<10, &req, func() map[string]string {
		return map[string]string{"zone": req.Zone, "from": req.From, "to": req.To, "meaning": req.Meaning}
	}) {
		return
	}
	sess, ok := people.FromContext(r.Context())
	if !ok || !sess.SignedIn() || r.Header.Get("Authorization") != "" {
		httpx.WriteError(w, http.StatusForbidden, "a report is signed by a person signed in on the pages, not by a token")
		return
	}
	m, err := people.ParseMeaning(req.Meaning)
	if err != nil || !access.MaySign(string(sess.Person.Role), req.Meaning) {
		httpx.WriteFieldError(w, "meaning", fmt.Sprintf("%q: role %s may sign a report as %s", req.Meaning, sess.Person.Role, strings.Join(access.SignMeanings(string(sess.Person.Role)), ", ")))
		return
	}
	subject, content, ok := s.reportQuery(w, r, req.Zone, req.From, req.To)
	if !ok {
		return
	}
	if _, err := s.sigs.Sign(r.Context(), sess, people.SignRequest{Meaning: m, Subject: subject, Content: content, Password: req.Password}); err != nil {
		writePeopleError(w, err)
		return
	}
	httpx.WriteJSON(w, http.StatusOK, s.signaturesOf(subject, content))
}

// reportSignaturesFor are the signatures of the report's signature block:
// only those whose SHA-256 matches the report as it reads now (the block
// below it lists every one, a mismatch marked).
func (s *Server) reportSignaturesFor(subject string, content []byte) []report.Signature {
	var out []report.Signature
	for _, sig := range s.signaturesOf(subject, content) {
		if sig.Matches {
			out = append(out, report.Signature{Meaning: string(sig.Meaning), FullName: sig.FullName, UserName: sig.UserName,
				Time: sig.Time, Method: sig.Method, SHA256: sig.SHA256})
		}
	}
	return out
}

// reportSignatureLines are the signature lines printed on the report.
func (s *Server) reportSignatureLines(subject string, content []byte) []string {
	var lines []string
	for _, sig := range s.signaturesOf(subject, content) {
		l := sig.String()
		if !sig.Matches {
			l += " — NOT of this report as it reads now: the content it signed differs"
		}
		lines = append(lines, l)
	}
	return lines
}
