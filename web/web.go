// Package web renders beamledger's pages: html/template pages and static assets,
// embedded in the binary. It knows nothing of HTTP frameworks; server mounts it and
// fills the page data from the domain.
package web

import (
	"bytes"
	"embed"
	"fmt"
	"html/template"
	"io"
	"io/fs"
	"strings"
)

//go:embed templates/*.html
var templateFS embed.FS

//go:embed static
var staticFS embed.FS

// Static returns the static assets (stylesheet, scripts, vendored libraries), rooted
// at "static".
func Static() fs.FS {
	sub, err := fs.Sub(staticFS, "static")
	if err != nil {
		panic(err) // the embedded tree is fixed at build time
	}
	return sub
}

// Pages renders the embedded templates: each page is the shared layout with the
// page's own "content" (and optional "scripts") blocks.
type Pages struct {
	pages map[string]*template.Template
}

// pageNames are the page templates; partials live in the page that owns them.
var pageNames = []string{"signin", "start", "calendar", "acquire", "files", "trace", "statements", "reports", "ledger", "qualifications", "rates", "instruments", "people", "service"}

var funcs = template.FuncMap{
	"lower": strings.ToLower,
}

// NewPages parses the templates once.
func NewPages() (*Pages, error) {
	p := &Pages{pages: map[string]*template.Template{}}
	for _, n := range pageNames {
		t, err := template.New(n).Funcs(funcs).ParseFS(templateFS, "templates/layout.html", "templates/"+n+".html")
		if err != nil {
			return nil, err
		}
		p.pages[n] = t
	}
	return p, nil
}

// Render writes page name with data; block is "layout" for a whole page or the name
// of a fragment the page defines (an htmx swap).
func (p *Pages) Render(w io.Writer, name, block string, data any) error {
	t, ok := p.pages[name]
	if !ok {
		return fmt.Errorf("web: no page %q", name)
	}
	var buf bytes.Buffer
	if err := t.ExecuteTemplate(&buf, block, data); err != nil {
		return err
	}
	_, err := buf.WriteTo(w)
	return err
}

// Page is what every page shows around its content.
type Page struct {
	Title        string
	FacilityName string
	TimeZone     string
	Demo         bool
	// CSRF is repeated by forms and scripts on every state-changing request.
	CSRF string
	// Nav names the current section, for aria-current.
	Nav    string
	Viewer *Viewer
	// Script is the page's own script under /static, if any.
	Script string
}

// Viewer is the signed-in user as the pages need them.
type Viewer struct {
	ID, Name, Email, Role string
	// Books: may make bookings; Staff: manager or staff, who book service time and
	// for others; ReadsAll: reads every project (managers, staff, auditors).
	Books, Staff, ReadsAll bool
}

// SignInData is the sign-in page.
type SignInData struct {
	Page
}
