package server

import (
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"

	"beamledger/web"
)

func (s *Server) webRoutes(add func(method, path string, r rule, h echo.HandlerFunc)) {
	add(http.MethodGet, "/", open(), s.handleStartPage)
	files := http.FileServerFS(web.Static())
	// Folders are not listed: only the named assets are served.
	static := http.StripPrefix("/static/", http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path == "" || strings.HasSuffix(r.URL.Path, "/") {
			http.NotFound(w, r)
			return
		}
		files.ServeHTTP(w, r)
	}))
	add(http.MethodGet, "/static/*", open(), echo.WrapHandler(static))
}

func (s *Server) handleStartPage(c echo.Context) error {
	name := "beamledger"
	if f, err := s.store.Facility(c.Request().Context()); err == nil {
		name = f.Name
	}
	c.Response().Header().Set(echo.HeaderContentType, echo.MIMETextHTMLCharsetUTF8)
	c.Response().WriteHeader(http.StatusOK)
	return s.pages.Start(c.Response(), web.StartData{FacilityName: name, Demo: s.cfg.Demo})
}
