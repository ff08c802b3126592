package httpx

import (
	"context"
	"fmt"
	"log/slog"
	"net/http"
	"runtime/debug"
	"time"

	"github.com/go-chi/chi/v5/middleware"
)

// Identity is who sent a request, as far as the access layer could tell:
// the name of the token, or the person signed in on the pages, or neither.
// It is filled in by the access middleware, which runs inside RequestLog,
// and read by the log line and the handlers that record who acted.
type Identity struct {
	Token    string // the bearer token's name; "" for none
	User     string // the signed-in person's account name; "" for none
	FullName string // the signed-in person's full name
	Role     string // the role of the token or the person
}

// identityKey is the context key of a request's *Identity; a type of its
// own so that no other package can collide with it.
type identityKey struct{}

// IdentityOf is the identity of r; a request that did not pass through
// RequestLog has an empty one.
func IdentityOf(r *http.Request) *Identity {
	if id, ok := r.Context().Value(identityKey{}).(*Identity); ok {
		return id
	}
	return &Identity{}
}

// WithIdentity returns r carrying id, for handlers run without RequestLog
// (tests).
func WithIdentity(r *http.Request, id *Identity) *http.Request {
	return r.WithContext(context.WithValue(r.Context(), identityKey{}, id))
}

// RequestLog writes one line per request, after it, naming the token that
// made it. A stream cut off midway is logged as aborted.
func RequestLog(log *slog.Logger) func(http.Handler) http.Handler {
	return func(next http.Handler) http.Handler {
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			start := time.Now()
			id := &Identity{}
			r = WithIdentity(r, id)
			ww := middleware.NewWrapResponseWriter(w, r.ProtoMajor)
			completed := false
			// Deferred, so that a stream cut off midway is logged too.
			defer func() {
				status := ww.Status()
				if status == 0 {
					status = http.StatusOK
				}
				lvl, msg := slog.LevelInfo, "http request"
				if status >= 500 || !completed {
					lvl = slog.LevelWarn
				}
				if !completed {
					msg = "http request aborted"
				}
				log.Log(r.Context(), lvl, msg,
					"method", r.Method, "path", r.URL.Path, "status", status,
					"bytes", ww.BytesWritten(), "duration", time.Since(start).Round(time.Microsecond),
					"remote", r.RemoteAddr, "token", id.Token, "user", id.User)
			}()
			next.ServeHTTP(ww, r)
			completed = true
		})
	}
}

// Recoverer turns a panic into a logged 500; http.ErrAbortHandler passes
// through, since it is how a stream that failed midway cuts the connection
// instead of ending with a well-formed but incomplete answer.
func Recoverer(log *slog.Logger) func(http.Handler) http.Handler {
	return func(next http.Handler) http.Handler {
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			defer func() {
				if v := recover(); v != nil {
					if v == http.ErrAbortHandler {
						panic(v)
					}
					log.Error("handler panic", "method", r.Method, "path", r.URL.Path, "panic", fmt.Sprint(v), "stack", string(debug.Stack()))
					WriteError(w, http.StatusInternalServerError, "internal error")
				}
			}()
			next.ServeHTTP(w, r)
		})
	}
}

// Time limits of the HTTP side. Streams (readings, backup) extend their
// own write deadline, so WriteTimeout only bounds ordinary answers.
const (
	ReadHeaderTimeout = 5 * time.Second
	ReadTimeout       = time.Minute
	WriteTimeout      = time.Minute
	IdleTimeout       = 2 * time.Minute
	RequestTimeout    = 30 * time.Second
	StreamTimeout     = 10 * time.Minute
	BackupTimeout     = time.Hour
)

// Timeout bounds a request's work through its context and, past the
// server's WriteTimeout, extends the write deadline of the connection to
// match.
func Timeout(d time.Duration) func(http.Handler) http.Handler {
	return func(next http.Handler) http.Handler {
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			ctx, cancel := context.WithTimeout(r.Context(), d)
			defer cancel()
			if d > WriteTimeout {
				// Not every ResponseWriter supports it (tests with a recorder).
				_ = http.NewResponseController(w).SetWriteDeadline(time.Now().Add(d + 5*time.Second))
			}
			next.ServeHTTP(w, r.WithContext(ctx))
		})
	}
}
