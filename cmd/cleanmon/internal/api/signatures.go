package api

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"strings"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/people"
)

// signatureRequest is the signature part of an acknowledgement or a state
// change made by a person: the password typed again (ignored for a
// provider sign-in, which must be fresh instead) and the stated meaning.
type signatureRequest struct {
	Meaning  string `json:"meaning"`
	Password string `json:"password"`
}

// ErrTokenRefused: the site requires signatures, and a token cannot sign.
var errTokenRefused = errors.New("this site requires an electronic signature for acknowledgements and operating-state changes (signatures_required): an API token cannot sign; a person must sign in on the pages and sign")

// actor is who a state-changing request is recorded under.
type actor struct {
	who string            // as recorded on the record: "Full Name (name)", a token's name, or free text (open demo)
	sig *people.Signature // the person's signature, when one was made
}

// signedActor decides who makes a change and, for a signed-in person,
// makes the signature of content under subject. need says whether a
// person must sign (an action alarm, a state change); a person may sign
// when it is not needed. A token is refused when the site requires
// signatures. It has answered the request when it returns false.
func (s *Server) signedActor(w http.ResponseWriter, r *http.Request, remark string, sr *signatureRequest, want people.Meaning, need bool, subject string, content []byte) (actor, bool) {
	sess, ok := people.FromContext(r.Context())
	person := ok && sess.SignedIn() && r.Header.Get("Authorization") == ""
	if !person {
		if httpx.IdentityOf(r).Token != "" && s.auth.SignaturesRequired() {
			httpx.WriteError(w, http.StatusForbidden, errTokenRefused.Error())
			return actor{}, false
		}
		return actor{who: identityOf(r, remark)}, true
	}
	who := sess.Person.FullName + " (" + sess.Person.Name + ")"
	if sr == nil {
		if need || (content != nil && s.auth.SignaturesRequired()) {
			httpx.WriteFieldError(w, "signature", fmt.Sprintf("missing: sign with your password and the meaning %q", want))
			return actor{}, false
		}
		return actor{who: who}, true
	}
	m, err := people.ParseMeaning(sr.Meaning)
	if err != nil || m != want {
		httpx.WriteFieldError(w, "signature.meaning", fmt.Sprintf("%q: this record is signed as %q", sr.Meaning, want))
		return actor{}, false
	}
	sig, err := s.sigs.Sign(r.Context(), sess, people.SignRequest{Meaning: m, Subject: subject, Content: content, Password: sr.Password})
	if err != nil {
		writeSignError(w, err)
		return actor{}, false
	}
	return actor{who: who, sig: &sig}, true
}

// writeSignError answers a refused signature with what to do about it.
func writeSignError(w http.ResponseWriter, err error) {
	msg := strings.TrimPrefix(err.Error(), "people: ")
	switch {
	case errors.Is(err, people.ErrReauth):
		httpx.WriteError(w, http.StatusUnauthorized, msg+": sign in at the identity provider again, then sign")
	case errors.Is(err, people.ErrBadCredentials), errors.Is(err, people.ErrLocked), errors.Is(err, people.ErrDisabled), errors.Is(err, people.ErrSamePerson):
		httpx.WriteError(w, http.StatusForbidden, "not signed: "+msg)
	case errors.Is(err, people.ErrInvalid):
		httpx.WriteError(w, http.StatusBadRequest, "not signed: "+msg)
	case errors.Is(err, people.ErrBusy):
		httpx.WriteError(w, http.StatusServiceUnavailable, msg)
	default:
		Errors.Write(w, "signature not recorded: ", err)
	}
}

// alarmJSON is an alarm with the signatures made on it.
type alarmJSON struct {
	alerts.Alarm
	Signatures []people.Signature `json:"signatures,omitempty"`
}

// alarmSubject names an alarm in its signatures.
func alarmSubject(id string) string { return "alarm " + id }

// withSignatures adds each alarm's signatures.
func (s *Server) withSignatures(as []alerts.Alarm) []alarmJSON {
	out := make([]alarmJSON, len(as))
	for i, a := range as {
		out[i] = alarmJSON{Alarm: a, Signatures: s.sigs.SignaturesFor(alarmSubject(a.ID))}
	}
	return out
}

// activeAlarm finds an open alarm and its exact JSON, the content an
// acknowledgement signs.
func (s *Server) activeAlarm(id string) (alerts.Alarm, []byte, bool) {
	for _, a := range s.alarms.Active() {
		if a.ID == id {
			b, err := json.Marshal(a)
			return a, b, err == nil
		}
	}
	return alerts.Alarm{}, nil, false
}
