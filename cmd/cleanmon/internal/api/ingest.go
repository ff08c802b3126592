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
	ingestAnswer(w, res, err)
}

// postPressure is POST /api/v1/pressure under the same rules.
func (s *Server) postPressure(w http.ResponseWriter, r *http.Request) {
	res, err := s.ingest.PostPressure(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	ingestAnswer(w, res, err)
}

// ingestError is the error body of the ingest routes: the common one, with
// the element at fault when one is.
type ingestError struct {
	Error string  `json:"error"`
	Index *int    `json:"index,omitempty"`
	Field *string `json:"field,omitempty"`
	Line  int     `json:"line,omitempty"`
}

func ingestAnswer(w http.ResponseWriter, res collector.Result, err error) {
	var ie *collector.InputError
	switch {
	case err == nil:
		httpx.WriteJSON(w, http.StatusOK, res)
	case errors.As(err, &ie):
		httpx.WriteJSON(w, http.StatusBadRequest, ingestError{Error: ie.Error(), Index: &ie.Index, Field: &ie.Field, Line: ie.Line})
	default:
		httpx.WriteJSON(w, Errors.Status(err), ingestError{Error: err.Error()})
	}
}
