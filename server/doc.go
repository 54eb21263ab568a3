// Package server is beamledger's composition root and HTTP layer: configuration, echo
// routes (all declared in routes.go with the access rule of each), JWT and agent-token
// authentication, middleware, the one table mapping domain errors to status codes, and
// the OpenAPI document. It is the only package that imports echo or golang-jwt;
// handlers are thin and pass a context.Context, never an echo.Context, downwards.
package server
