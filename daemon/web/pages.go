package web

import (
	"bytes"
	"crypto/sha256"
	"embed"
	"encoding/hex"
	"fmt"
	"html/template"
	"io/fs"
	"net/http"
	"path"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/jobs/history"
)

//go:embed ui/*.html
var templatesFS embed.FS

//go:embed assets
var assetsFS embed.FS

//go:embed openapi.json
var openAPIDoc []byte

// caution is printed on every page.
const caution = "These are statistical signals for people to review, not a compliance determination. Defer to local regulations and qualified professionals."

// pageCSP keeps the pages to this server: no request leaves the daemon.
const pageCSP = "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; connect-src 'self'; " +
	"base-uri 'none'; form-action 'none'; frame-ancestors 'none'"

// asset is one embedded file with its validator.
type asset struct {
	body []byte
	etag string
}

// pages holds the parsed templates and the assets.
type pages struct {
	tmpl  *template.Template
	files map[string]asset
	// version changes whenever an asset does; page links carry it so that
	// browsers fetch new assets after an upgrade.
	version string
}

func newPages() (*pages, error) {
	tmpl, err := template.ParseFS(templatesFS, "ui/*.html")
	if err != nil {
		return nil, fmt.Errorf("web: page templates: %w", err)
	}
	p := &pages{tmpl: tmpl, files: map[string]asset{}}
	all := sha256.New()
	err = fs.WalkDir(assetsFS, "assets", func(name string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		body, err := assetsFS.ReadFile(name)
		if err != nil {
			return err
		}
		sum := sha256.Sum256(body)
		all.Write(sum[:])
		p.files[strings.TrimPrefix(name, "assets/")] = asset{body: body, etag: `"` + hex.EncodeToString(sum[:8]) + `"`}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("web: assets: %w", err)
	}
	p.version = hex.EncodeToString(all.Sum(nil)[:6])
	return p, nil
}

// assets serves GET /assets/{name}.
func (p *pages) assets() http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		name := strings.TrimPrefix(r.URL.Path, "/assets/")
		a, ok := p.files[name]
		if !ok {
			http.NotFound(w, r)
			return
		}
		h := w.Header()
		h.Set("ETag", a.etag)
		h.Set("Cache-Control", "no-cache")
		h.Set("X-Content-Type-Options", "nosniff")
		// ServeContent sets the type from the extension and answers
		// If-None-Match with 304.
		http.ServeContent(w, r, path.Base(name), time.Time{}, bytes.NewReader(a.body))
	})
}

// pageData is what the page templates see.
type pageData struct {
	Title    string
	Model    string
	Caution  string
	Version  string
	NotFound bool
}

func (s *Server) render(w http.ResponseWriter, status int, name string, data pageData) {
	data.Caution, data.Version = caution, s.pages.version
	var buf bytes.Buffer
	if err := s.pages.tmpl.ExecuteTemplate(&buf, name, data); err != nil {
		s.log.Error("render page", "page", name, "err", err)
		http.Error(w, "the page could not be drawn (see the daemon's log)", http.StatusInternalServerError)
		return
	}
	h := w.Header()
	h.Set("Content-Type", "text/html; charset=utf-8")
	h.Set("Content-Security-Policy", pageCSP)
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("Referrer-Policy", "no-referrer")
	h.Set("Cache-Control", "no-cache")
	w.WriteHeader(status)
	_, _ = w.Write(buf.Bytes())
}

// fleetPage serves GET /: every model at a glance.
func (s *Server) fleetPage(w http.ResponseWriter, r *http.Request) {
	s.render(w, http.StatusOK, "fleet.html", pageData{Title: "Fleet"})
}

// modelPage serves GET /models/{model}.
func (s *Server) modelPage(w http.ResponseWriter, r *http.Request) {
	name := r.PathValue("model")
	if _, ok := s.byName[name]; !ok {
		s.render(w, http.StatusNotFound, "missing.html", pageData{Title: "No such model", Model: name, NotFound: true})
		return
	}
	s.render(w, http.StatusOK, "model.html", pageData{Title: name, Model: name})
}

// openAPI serves the API's description.
func (s *Server) openAPI(w http.ResponseWriter, r *http.Request, _ *history.Store) error {
	w.WriteHeader(http.StatusOK)
	_, _ = w.Write(openAPIDoc)
	return nil
}
