package api

import (
	"cleanmon/cmd/cleanmon/internal/httpx"
	"net/http"
)

// healthz answers while the process runs.
func (s *Server) healthz(w http.ResponseWriter, r *http.Request) {
	httpx.WriteJSON(w, http.StatusOK, map[string]string{"status": "ok"})
}

// readyz answers 200 while the store is open, ingest runs and writes
// succeed; 503 while starting or stopping, and while writes are refused
// or failing (a store integrity fault, a full disk), naming why. A failing
// notifier does not make the daemon unready (readings are still taken and
// kept, and deliveries wait in the outbox). Without a token that may read,
// the answer is the status alone: notifier names and faults are the
// site's business, not a passer-by's.
func (s *Server) readyz(w http.ResponseWriter, r *http.Request) {
	sess, err := s.auth.Session(r)
	detail := err == nil && (sess.Open || (sess.SignedIn && sess.MayRead))
	problem := ""
	if p := s.writeProblem.Load(); p != nil {
		problem = *p
	}
	switch {
	case !s.ready.Load():
		httpx.WriteJSON(w, http.StatusServiceUnavailable, map[string]string{"status": "not ready", "error": "not ready: starting or shutting down"})
		return
	case problem != "" && !detail:
		httpx.WriteJSON(w, http.StatusServiceUnavailable, map[string]string{"status": "not ready", "error": "not ready: writes are refused or failing (details with a token)"})
		return
	case problem != "":
		httpx.WriteJSON(w, http.StatusServiceUnavailable, map[string]any{"status": "not ready", "error": "not ready: " + problem, "notifiers": s.alarms.Notifiers()})
		return
	case !detail:
		httpx.WriteJSON(w, http.StatusOK, map[string]string{"status": "ready"})
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

// SetWriteProblem says why writes are refused or failing ("" when they
// succeed): while set, /readyz answers not ready.
func (s *Server) SetWriteProblem(reason string) {
	if reason == "" {
		s.writeProblem.Store(nil)
		return
	}
	s.writeProblem.Store(&reason)
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
