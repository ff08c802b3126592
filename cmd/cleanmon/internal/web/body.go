package web

import (
	"fmt"
	"io"
	"net/http"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
)

// maxFreeText bounds a name, a comment or a reason a page sends.
const maxFreeText = 2000

// bodyError is the 400 or 413 of a refused page request: the same shape
// the API answers, so the pages show one kind of message.
type bodyError struct {
	Error string  `json:"error"`
	Index *int    `json:"index,omitempty"`
	Field *string `json:"field,omitempty"`
	Rule  string  `json:"rule,omitempty"`
}

// decodeBody reads a small JSON object from a page into v with
// collector.DecodeObject (strict keys, plain text in the fields texts
// names) and reports whether v was filled; when not, the answer is written.
func decodeBody(w http.ResponseWriter, r *http.Request, limit int64, v any, texts func() map[string]string) bool {
	data, err := io.ReadAll(io.LimitReader(r.Body, limit+1))
	if err != nil {
		httpx.WriteError(w, http.StatusBadRequest, "the body could not be read")
		return false
	}
	if int64(len(data)) > limit {
		httpx.WriteRefusal(w, r, http.StatusRequestEntityTooLarge, bodyError{Error: fmt.Sprintf("body larger than %d bytes", limit)})
		return false
	}
	if ie := collector.DecodeObject(data, v, texts, maxFreeText); ie != nil {
		httpx.WriteJSON(w, http.StatusBadRequest, bodyError{Error: ie.Error(), Index: &ie.Index, Field: &ie.Field, Rule: ie.Rule})
		return false
	}
	return true
}
