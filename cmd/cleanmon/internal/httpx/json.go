package httpx

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"net/http"
	"strings"
	"time"
)

// ErrorBody is the one shape of every error answer. Field names the query
// parameter or body field at fault, when there is one.
type ErrorBody struct {
	Error string `json:"error"`
	Field string `json:"field,omitempty"`
}

// Marshal renders an answer exactly as WriteJSON sends it, so that a
// digest of it (the certification report names one) matches the bytes a
// client receives. HTML characters are not escaped: the messages quote
// "≥" and "> 0", and answers are served as JSON, never as HTML.
func Marshal(v any) ([]byte, error) {
	var b bytes.Buffer
	enc := json.NewEncoder(&b)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

// WriteJSON is the one JSON writer: every JSON answer goes through it.
func WriteJSON(w http.ResponseWriter, status int, v any) {
	b, err := Marshal(v)
	if err != nil {
		status, b = http.StatusInternalServerError, []byte("{\"error\":\"answer could not be encoded\"}\n")
	}
	WriteRaw(w, status, b)
}

// WriteRaw sends an answer already rendered by Marshal.
func WriteRaw(w http.ResponseWriter, status int, body []byte) {
	h := w.Header()
	h.Set("Content-Type", "application/json")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Content-Type-Options", "nosniff")
	w.WriteHeader(status)
	w.Write(body)
}

// WriteError answers status with msg in the error body.
func WriteError(w http.ResponseWriter, status int, msg string) {
	WriteJSON(w, status, ErrorBody{Error: msg})
}

// WriteFieldError is a 400 naming the query parameter or body field at
// fault.
func WriteFieldError(w http.ResponseWriter, field, msg string) {
	WriteJSON(w, http.StatusBadRequest, ErrorBody{Error: field + ": " + msg, Field: field})
}

// Rule maps an error value (matched with errors.Is) to a status.
type Rule struct {
	Err    error
	Status int
}

// Table is the mapping from error values to HTTP statuses. The daemon has
// one (api.Errors); a handler never picks a status for an error itself.
type Table []Rule

// Status is the status of err: the first rule that matches; else 504 for
// a request that ran out of time, and 503 for anything else, since an
// error no rule knows is a fault of the daemon's side (a store that
// failed), not of the request.
func (t Table) Status(err error) int {
	for _, r := range t {
		if errors.Is(err, r.Err) {
			return r.Status
		}
	}
	if errors.Is(err, context.DeadlineExceeded) {
		return http.StatusGatewayTimeout
	}
	return http.StatusServiceUnavailable
}

// Write answers err with its status and prefix + its message.
func (t Table) Write(w http.ResponseWriter, prefix string, err error) {
	WriteError(w, t.Status(err), prefix+err.Error())
}

// FormatDuration writes a duration as a configuration would: "10m", "1h",
// "1m30s" rather than "10m0s".
func FormatDuration(d time.Duration) string {
	s := d.String()
	if strings.HasSuffix(s, "m0s") {
		s = strings.TrimSuffix(s, "0s")
	}
	if strings.HasSuffix(s, "h0m") {
		s = strings.TrimSuffix(s, "0m")
	}
	return s
}
