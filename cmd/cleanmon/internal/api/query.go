package api

import (
	"context"
	"fmt"
	"net/http"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/httpx"
)

func (s *Server) queryRange(w http.ResponseWriter, r *http.Request) (from, to time.Time, ok bool) {
	return httpx.QueryRange(w, r, s.now())
}

// zoneKey is the context key of the zone a {zone} route names.
type zoneKey struct{}

// zone resolves {zone} once for every route under /zones/{zone}: an
// unknown zone is a 404 here, and the handler finds the configured zone
// with zoneOf. It runs after the access check, so that a caller without
// a token learns nothing of which zones exist.
func (s *Server) zone(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		id := chi.URLParam(r, "zone")
		z, ok := s.cfg.Zone(id)
		if !ok {
			httpx.WriteError(w, http.StatusNotFound, fmt.Sprintf("unknown zone %q", id))
			return
		}
		next.ServeHTTP(w, r.WithContext(context.WithValue(r.Context(), zoneKey{}, z)))
	})
}

// zoneOf is the zone the zone middleware resolved.
func zoneOf(r *http.Request) *alerts.ZoneConfig {
	return r.Context().Value(zoneKey{}).(*alerts.ZoneConfig)
}

// location reads the location filter of a zone's route: "" for all, or a
// location of the zone (else a 400 naming it).
func location(w http.ResponseWriter, r *http.Request, z *alerts.ZoneConfig) (string, bool) {
	loc := r.URL.Query().Get("location")
	if loc == "" {
		return "", true
	}
	for _, l := range z.Locations {
		if l.ID == loc {
			return loc, true
		}
	}
	httpx.WriteFieldError(w, "location", fmt.Sprintf("%q is not a location of zone %q", loc, z.ID))
	return "", false
}
