// Package web renders beamledger's pages: html/template pages and static assets,
// embedded in the binary. It knows nothing of HTTP frameworks; server mounts it.
package web

import (
	"bytes"
	"embed"
	"html/template"
	"io"
	"io/fs"
)

//go:embed templates/*.html
var templateFS embed.FS

//go:embed static
var staticFS embed.FS

// Static returns the static assets (stylesheet, scripts), rooted at "static".
func Static() fs.FS {
	sub, err := fs.Sub(staticFS, "static")
	if err != nil {
		panic(err) // the embedded tree is fixed at build time
	}
	return sub
}

// Pages renders the embedded templates.
type Pages struct {
	t *template.Template
}

// NewPages parses the templates once.
func NewPages() (*Pages, error) {
	t, err := template.ParseFS(templateFS, "templates/*.html")
	if err != nil {
		return nil, err
	}
	return &Pages{t: t}, nil
}

// StartData is what the start page shows before sign-in.
type StartData struct {
	FacilityName string
	Demo         bool
}

// Start renders the start page: sign-in, then the signed-in user's overview.
func (p *Pages) Start(w io.Writer, d StartData) error {
	var buf bytes.Buffer
	if err := p.t.ExecuteTemplate(&buf, "start.html", d); err != nil {
		return err
	}
	_, err := buf.WriteTo(w)
	return err
}
