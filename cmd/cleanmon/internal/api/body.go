package api

import (
	"fmt"
	"io"
	"net/http"
	"sort"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
)

// maxFreeText bounds a comment, a reason or a name given in a request.
const maxFreeText = 2000

// decodeBody reads a small JSON object body into v under the ingest's
// strict rules (a key given twice, in another case, or unknown is refused
// with its name; no Go type names in any message), then checks the free
// text fields named in texts (field name → value after decoding). It
// reports whether v was filled; when not, the answer has been written:
// 400 {"error","index","field","rule"}, or 413 readable by the client.
func decodeBody(w http.ResponseWriter, r *http.Request, limit int64, v any, texts func() map[string]string) bool {
	data, err := io.ReadAll(io.LimitReader(r.Body, limit+1))
	switch {
	case err != nil:
		inputAnswer(w, collector.NewInputError(0, "", collector.RuleSyntax, "the body could not be read: %v", err))
		return false
	case int64(len(data)) > limit:
		httpx.WriteRefusal(w, r, http.StatusRequestEntityTooLarge, ingestError{Error: fmt.Sprintf("body larger than %d bytes", limit)})
		return false
	}
	if ie := collector.DecodeObject(data, v, texts, maxFreeText); ie != nil {
		inputAnswer(w, ie)
		return false
	}
	return true
}

// inputAnswer is the 400 of a refused request body.
func inputAnswer(w http.ResponseWriter, ie *collector.InputError) {
	httpx.WriteJSON(w, http.StatusBadRequest, ingestError{Error: ie.Error(), Index: &ie.Index, Field: &ie.Field, Line: ie.Line, Rule: ie.Rule})
}

// fieldAnswer is a 400 naming a field of a single-object body.
func fieldAnswer(w http.ResponseWriter, field, rule, format string, a ...any) {
	inputAnswer(w, collector.NewInputError(0, field, rule, format, a...))
}

func sortedNames(m map[string]string) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}
