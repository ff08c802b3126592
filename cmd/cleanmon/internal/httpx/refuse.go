package httpx

import (
	"io"
	"net/http"
)

// MaxDrain bounds what is read and thrown away of a refused body.
const MaxDrain = 64 << 20

// WriteRefusal answers a request whose body is not taken (too large,
// mostly) so that the client can read the answer: the connection goes
// full duplex, the answer is flushed, and the rest of the body (at most
// MaxDrain bytes, within the server's read timeout) is read and thrown
// away before the connection closes. Without that, the server closes on
// a client still sending, and the client sees a reset instead of the
// answer.
func WriteRefusal(w http.ResponseWriter, r *http.Request, status int, v any) {
	rc := http.NewResponseController(w)
	_ = rc.EnableFullDuplex() // HTTP/2 is full duplex already
	w.Header().Set("Connection", "close")
	WriteJSON(w, status, v)
	_ = rc.Flush()
	if r.Body != nil {
		_, _ = io.CopyN(io.Discard, r.Body, MaxDrain)
	}
}
