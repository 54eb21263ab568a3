package server

import (
	_ "embed"
	"encoding/json"
	"fmt"
	"net/http"

	"github.com/labstack/echo/v4"
	"gopkg.in/yaml.v3"
)

// openapiYAML is the API description, written by hand beside the routes and checked
// against them by TestOpenAPIMatchesRoutes.
//
//go:embed openapi.yaml
var openapiYAML []byte

// openapiJSON converts the embedded description once.
func openapiJSON() ([]byte, error) {
	var doc any
	if err := yaml.Unmarshal(openapiYAML, &doc); err != nil {
		return nil, fmt.Errorf("openapi.yaml: %w", err)
	}
	return json.Marshal(doc)
}

func (s *Server) handleOpenAPI(c echo.Context) error {
	return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, s.openapi)
}
