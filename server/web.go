package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger/web"
)

func (s *Server) webRoutes(add func(method, path string, r rule, h echo.HandlerFunc)) {
	add(http.MethodGet, "/", open(), s.handleStartPage)
	static := http.StripPrefix("/static/", http.FileServerFS(web.Static()))
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
