package httpx

import "net/http"

// HSTSMaxAge is how long a browser keeps to HTTPS for the daemon's host
// once it has seen it (one year, in seconds).
const HSTSMaxAge = "31536000"

// HSTS tells browsers to reach the daemon over HTTPS only: a daemon that
// serves TLS never wants a page, a token or a session cookie sent in the
// clear after a downgrade.
func HSTS(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Strict-Transport-Security", "max-age="+HSTSMaxAge)
		next.ServeHTTP(w, r)
	})
}
