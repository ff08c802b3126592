package web

import (
	"bytes"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"crypto/sha256"
	"embed"
	"encoding/hex"
	"fmt"
	"html"
	"io/fs"
	"net/http"
	"path"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"
)

// The operator's pages: static HTML shells, one JavaScript module each and
// a style sheet, all embedded, calling the JSON API of the same origin.
// Nothing is built: the files in assets/ and pages/ are what the browser
// gets.
//
//go:embed assets pages
var webFiles embed.FS

// pageCSP is sent with every page and asset: scripts and styles only from
// files of this origin, so no inline script or style attribute runs.
const pageCSP = "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; " +
	"connect-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'self'"

// pageHeaders sets the security headers of the pages, their assets and
// their data routes. A handler may replace the policy with a stricter one
// of its own (the certification report does).
func pageHeaders(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("Content-Security-Policy", pageCSP)
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "no-referrer")
		h.Set("X-Frame-Options", "DENY")
		next.ServeHTTP(w, r)
	})
}

// webFile is one embedded file, ready to serve.
type webFile struct {
	name  string
	body  []byte
	ctype string
	etag  string
}

// contentTypes are set by extension here rather than from the system's
// MIME table, which differs between hosts: a module script refused for
// its type (nosniff) would leave a blank page.
var contentTypes = map[string]string{
	".html": "text/html; charset=utf-8",
	".js":   "text/javascript; charset=utf-8",
	".css":  "text/css; charset=utf-8",
	".svg":  "image/svg+xml",
}

// webAssets are the files under assets, by path below it; webPages the
// HTML shells under pages, by file name.
var webAssets, webPages = loadWebFiles()

func loadWebFiles() (assets, pages map[string]*webFile) {
	assets, pages = map[string]*webFile{}, map[string]*webFile{}
	err := fs.WalkDir(webFiles, ".", func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		if strings.HasPrefix(p, "pages/shared/") {
			return nil // a part of pages (sharedParts), not served alone
		}
		body, err := webFiles.ReadFile(p)
		if err != nil {
			return err
		}
		if strings.HasPrefix(p, "pages/") {
			if body, err = withSharedParts(p, body); err != nil {
				return err
			}
		}
		ctype, ok := contentTypes[path.Ext(p)]
		if !ok {
			return fmt.Errorf("web file %s: no content type for its extension", p)
		}
		sum := sha256.Sum256(body)
		f := &webFile{name: p, body: body, ctype: ctype, etag: `"` + hex.EncodeToString(sum[:12]) + `"`}
		switch {
		case strings.HasPrefix(p, "assets/"):
			assets[strings.TrimPrefix(p, "assets/")] = f
		case strings.HasPrefix(p, "pages/"):
			pages[strings.TrimPrefix(p, "pages/")] = f
		default:
			return fmt.Errorf("web file %s: neither under assets nor pages", p)
		}
		return nil
	})
	if err != nil {
		panic(err) // the embedded folder is part of the binary: a build defect
	}
	return assets, pages
}

// sharedParts are the pieces every page shell holds alike (the head's
// metadata and style sheet; the top bar with its navigation, sign-in and
// banner), each kept once in pages/shared/<name>.html and put in place of the
// page's line "<!-- shared: <name> -->" when the files are loaded.
var sharedParts = []string{"head", "top"}

// withSharedParts fills the page's shared parts in; a page that lacks
// one, or holds it twice, is a build defect named by file.
func withSharedParts(name string, body []byte) ([]byte, error) {
	for _, part := range sharedParts {
		marker := []byte("<!-- shared: " + part + " -->\n")
		if n := bytes.Count(body, marker); n != 1 {
			return nil, fmt.Errorf("web file %s: %d lines %q, want one", name, n, bytes.TrimSpace(marker))
		}
		text, err := webFiles.ReadFile("pages/shared/" + part + ".html")
		if err != nil {
			return nil, err
		}
		body = bytes.Replace(body, marker, text, 1)
	}
	return body, nil
}

// serve writes the file; the ETag lets a wall screen that reloads every
// morning revalidate instead of fetching again.
func (f *webFile) serve(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", f.ctype)
	w.Header().Set("ETag", f.etag)
	w.Header().Set("Cache-Control", "no-cache")
	http.ServeContent(w, r, "", time.Time{}, bytes.NewReader(f.body))
}

// Register mounts the operator's pages, their assets and the few JSON
// routes only the pages use (site layout, DP history, sign-in check,
// certification report). Page shells and assets hold no data and need no
// token; everything with data asks for the same permission as the API.
func (s *Server) Register(r chi.Router) {
	r.Group(func(r chi.Router) {
		r.Use(pageHeaders)
		short := httpx.Timeout(httpx.RequestTimeout)
		long := httpx.Timeout(httpx.StreamTimeout)
		read := s.auth.Require(access.PermRead)

		static := func(pattern string, h http.HandlerFunc) {
			r.With(short).Get(pattern, h)
			r.With(short).Head(pattern, h)
		}
		static("/", servePage("overview.html"))
		static("/alarms", servePage("alarms.html"))
		static("/certify", servePage("certify.html"))
		static("/zones/{zone}", s.zonePage)
		static("/assets/*", serveAsset)
		s.registerRecords(r, static, long, read)

		r.With(short, read).Get("/ui/session", s.uiSession)
		r.With(short, read).Get("/ui/site", s.uiSite)
		r.With(long, read).Get("/ui/pressure/{sensor}", s.uiPressure)
		r.With(long, read).Get("/certify/report", s.certifyReport)
		s.registerPeople(r)
	})
}

func servePage(name string) http.HandlerFunc {
	f := webPages[name]
	if f == nil {
		panic("no embedded page " + name)
	}
	return f.serve
}

// zonePage serves the zone shell for a configured zone, so that a mistyped
// address is a 404 and not an empty page.
func (s *Server) zonePage(w http.ResponseWriter, r *http.Request) {
	if _, ok := s.cfg.Zone(chi.URLParam(r, "zone")); !ok {
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.WriteHeader(http.StatusNotFound)
		fmt.Fprintf(w, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>No such zone</title>"+
			"<link rel=\"stylesheet\" href=\"/assets/app.css\"></head><body><main><h1>No such zone</h1>"+
			"<p>The site has no zone %q. <a href=\"/\">Back to the overview</a>.</p></main></body></html>\n",
			html.EscapeString(chi.URLParam(r, "zone")))
		return
	}
	webPages["zone.html"].serve(w, r)
}

func serveAsset(w http.ResponseWriter, r *http.Request) {
	f := webAssets[chi.URLParam(r, "*")]
	if f == nil {
		httpx.WriteError(w, http.StatusNotFound, "no such asset: "+r.URL.Path)
		return
	}
	f.serve(w, r)
}
