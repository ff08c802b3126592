package api

import (
	_ "embed"
	"net/http"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
)

// openAPI is the description of the API (OpenAPI 3.1), written once by
// hand. The tests check that every route of the router is in it and that
// real answers of a running daemon validate against its schemas.
//
//go:embed openapi.json
var openAPI []byte

// OpenAPI returns the description of the API the daemon serves at
// GET /api/v1/openapi.json.
func OpenAPI() []byte { return openAPI }

// registerOpenAPI mounts GET /api/v1/openapi.json.
func (s *Server) registerOpenAPI(r chi.Router) {
	r.With(httpx.Timeout(httpx.RequestTimeout), s.auth.Require(access.PermRead)).Get("/openapi.json", func(w http.ResponseWriter, _ *http.Request) {
		httpx.WriteRaw(w, http.StatusOK, openAPI)
	})
}
