package collector

import (
	"encoding/json"
	"errors"
	"net/http"
)

// The daemon's HTTP routes (in the api package) call PostReadings and
// PostPressure; the tests of this package reach the same functions over a
// real HTTP server through this adapter, which answers as those routes do.

func (in *Ingest) Readings(w http.ResponseWriter, r *http.Request) {
	res, err := in.PostReadings(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	testAnswer(w, res, err)
}

func (in *Ingest) Pressure(w http.ResponseWriter, r *http.Request) {
	res, err := in.PostPressure(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	testAnswer(w, res, err)
}

type testErrorBody struct {
	Error string  `json:"error"`
	Index *int    `json:"index,omitempty"`
	Field *string `json:"field,omitempty"`
	Line  int     `json:"line,omitempty"`
}

func testAnswer(w http.ResponseWriter, res Result, err error) {
	var ie *InputError
	switch {
	case err == nil:
		testJSON(w, http.StatusOK, res)
	case errors.As(err, &ie):
		testJSON(w, http.StatusBadRequest, testErrorBody{Error: ie.Error(), Index: &ie.Index, Field: &ie.Field, Line: ie.Line})
	case errors.Is(err, ErrContentType):
		testJSON(w, http.StatusUnsupportedMediaType, testErrorBody{Error: err.Error()})
	case errors.Is(err, ErrTooLarge):
		testJSON(w, http.StatusRequestEntityTooLarge, testErrorBody{Error: err.Error()})
	case errors.Is(err, ErrCommit):
		testJSON(w, http.StatusServiceUnavailable, testErrorBody{Error: err.Error()})
	default:
		testJSON(w, http.StatusInternalServerError, testErrorBody{Error: err.Error()})
	}
}

func testJSON(w http.ResponseWriter, status int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(status)
	enc := json.NewEncoder(w)
	enc.SetEscapeHTML(false)
	_ = enc.Encode(v)
}

// ServeHTTP answers as the daemon's POST /api/v1/environment route does.
func (in *EnvironmentIngest) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	res, err := in.PostEnvironment(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	testAnswer(w, res, err)
}
