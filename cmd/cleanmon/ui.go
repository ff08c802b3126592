package main

import "github.com/go-chi/chi/v5"

// pageRoutes mounts the operator's pages. (Placeholder until the pages
// land: no page is served yet.)
func (s *server) pageRoutes(r chi.Router) {}
