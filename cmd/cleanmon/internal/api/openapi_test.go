package api

import (
	"net/http"
	"sort"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/go-chi/chi/v5"
)

// TestOpenAPIDescribesEveryRoute: the embedded description is a valid
// OpenAPI 3.1 document, every route the API mounts is in it with its
// method, and it describes no route the API does not have.
func TestOpenAPIDescribesEveryRoute(t *testing.T) {
	doc, err := openapi3.NewLoader().LoadFromData(OpenAPI())
	if err != nil {
		t.Fatal(err)
	}
	if !doc.IsOpenAPI31OrLater() {
		t.Fatalf("openapi %q, want 3.1", doc.OpenAPI)
	}
	if err := doc.Validate(t.Context()); err != nil {
		t.Fatalf("the description is not valid OpenAPI: %v", err)
	}
	s := newTestServer(t, Options{})
	r := chi.NewRouter()
	s.Register(r)
	mounted := map[string]bool{}
	err = chi.Walk(r, func(method, route string, _ http.Handler, _ ...func(http.Handler) http.Handler) error {
		route = strings.TrimSuffix(route, "/")
		mounted[method+" "+route] = true
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	described := map[string]bool{}
	for path, item := range doc.Paths.Map() {
		for method := range item.Operations() {
			described[method+" "+path] = true
		}
	}
	var missing, stale []string
	for k := range mounted {
		if !described[k] {
			missing = append(missing, k)
		}
	}
	for k := range described {
		if !mounted[k] {
			stale = append(stale, k)
		}
	}
	sort.Strings(missing)
	sort.Strings(stale)
	if len(missing) > 0 {
		t.Errorf("routes not in openapi.json: %q", missing)
	}
	if len(stale) > 0 {
		t.Errorf("openapi.json describes routes the API does not mount: %q", stale)
	}
	if len(mounted) < 20 {
		t.Errorf("only %d routes walked: %v", len(mounted), mounted)
	}
}
