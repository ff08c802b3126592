package api

import (
	"cleanmon/cmd/cleanmon/internal/httpx"
	"net/http"
)

// healthz answers while the process runs.
func (s *Server) healthz(w http.ResponseWriter, r *http.Request) {
	httpx.WriteJSON(w, http.StatusOK, map[string]string{"status": "ok"})
}

// readyz answers 200 while the store is open and ingest runs, with the
// health of every notifier as detail: a failing notifier does not make
// the daemon unready (readings are still taken and kept, and deliveries
// wait in the outbox), but it shows here and in the metrics.
func (s *Server) readyz(w http.ResponseWriter, r *http.Request) {
	if !s.ready.Load() {
		httpx.WriteError(w, http.StatusServiceUnavailable, "not ready: starting or shutting down")
		return
	}
	out := map[string]any{"status": "ready"}
	h := s.alarms.Notifiers()
	out["notifiers"] = h
	for _, n := range h {
		if !n.Up {
			out["status"] = "ready, notifier failing"
		}
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

// backup streams a consistent copy of the store.
func (s *Server) backup(w http.ResponseWriter, r *http.Request) {
	name := "cleanmon-" + s.now().UTC().Format("20060102T150405Z") + ".db"
	w.Header().Set("Content-Type", "application/octet-stream")
	w.Header().Set("Content-Disposition", `attachment; filename="`+name+`"`)
	w.Header().Set("Cache-Control", "no-store")
	n, err := s.store.Backup(w)
	if err != nil {
		s.log.Error("backup failed", "bytes", n, "err", err)
		if n == 0 {
			httpx.WriteError(w, http.StatusServiceUnavailable, "backup failed: "+err.Error())
			return
		}
		panic(http.ErrAbortHandler)
	}
	s.log.Info("backup sent", "bytes", n, "token", httpx.IdentityOf(r).Token)
}
