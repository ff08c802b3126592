// Package httpx is the HTTP plumbing every route of the daemon shares: one
// JSON writer, one error body, one table from error values to statuses,
// strict decoding of small JSON bodies, the hand-written row encoders of
// streamed answers, and the middleware (recover, request log, timeout)
// with the request's identity under a typed context key.
//
// It knows no resource and imports no package of the project: the routes
// that use it live in api and web.
package httpx
