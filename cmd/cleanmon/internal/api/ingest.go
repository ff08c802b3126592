package api

import (
	"errors"
	"net/http"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
)

// postReadings is POST /api/v1/readings: a JSON object, a JSON array or
// NDJSON (Content-Type application/x-ndjson) of readings. 200 with the
// collector's result once durable; 400 {"error","index","field","line"}
// for any bad reading (nothing stored); 413, 415 as usual; 503 when the
// store fails.
func (s *Server) postReadings(w http.ResponseWriter, r *http.Request) {
	res, err := s.ingest.PostReadings(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	ingestAnswer(w, r, res, err)
}

// postPressure is POST /api/v1/pressure under the same rules.
func (s *Server) postPressure(w http.ResponseWriter, r *http.Request) {
	res, err := s.ingest.PostPressure(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	ingestAnswer(w, r, res, err)
}

// ingestError is the error body of the ingest routes: the common one, with
// the element at fault when one is.
type ingestError struct {
	Error string  `json:"error"`
	Index *int    `json:"index,omitempty"`
	Field *string `json:"field,omitempty"`
	Line  int     `json:"line,omitempty"`
	// Rule names the rule the element broke (collector.Rule*).
	Rule string `json:"rule,omitempty"`
}

func ingestAnswer(w http.ResponseWriter, r *http.Request, res collector.Result, err error) {
	var ie *collector.InputError
	switch {
	case err == nil:
		httpx.WriteJSON(w, http.StatusOK, res)
	case errors.As(err, &ie):
		httpx.WriteJSON(w, http.StatusBadRequest, ingestError{Error: ie.Error(), Index: &ie.Index, Field: &ie.Field, Line: ie.Line, Rule: ie.Rule})
	case errors.Is(err, collector.ErrTooLarge):
		httpx.WriteRefusal(w, r, http.StatusRequestEntityTooLarge, ingestError{Error: err.Error()})
	default:
		httpx.WriteJSON(w, Errors.Status(err), ingestError{Error: err.Error()})
	}
}
