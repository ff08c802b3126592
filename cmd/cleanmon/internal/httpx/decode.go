package httpx

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"
)

// DecodeStrict reads a small JSON object body into v: unknown fields,
// trailing data and oversized bodies are refused with an answer naming
// the field. fields lists the expected fields for the message. It
// reports whether v was filled; when not, the answer has been written.
func DecodeStrict(w http.ResponseWriter, r *http.Request, limit int64, v any, fields string) bool {
	dec := json.NewDecoder(http.MaxBytesReader(w, r.Body, limit))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		var mbe *http.MaxBytesError
		switch {
		case errors.As(err, &mbe):
			WriteError(w, http.StatusRequestEntityTooLarge, fmt.Sprintf("body larger than %d bytes", limit))
		case strings.HasPrefix(err.Error(), "json: unknown field "):
			f := strings.Trim(strings.TrimPrefix(err.Error(), "json: unknown field "), `"`)
			WriteFieldError(w, f, "unknown field (want "+fields+")")
		default:
			WriteError(w, http.StatusBadRequest, "body: want a JSON object with "+fields+": "+err.Error())
		}
		return false
	}
	if _, err := dec.Token(); err != io.EOF {
		WriteError(w, http.StatusBadRequest, "body: unexpected data after the JSON object")
		return false
	}
	return true
}
