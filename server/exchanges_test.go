package server

import (
	"net/http"
	"sync"
)

// exchange is one request and answer seen by a test, kept so that the OpenAPI test
// can validate real answers against the documented schemas.
type exchange struct {
	Method string
	Path   string // the request path as sent, with ids
	Status int
	Header http.Header
	Body   []byte
}

var (
	exchangesMu sync.Mutex
	exchanges   []exchange
)

func recordExchange(method, path string, _ *http.Request, res *http.Response, body []byte) {
	exchangesMu.Lock()
	defer exchangesMu.Unlock()
	exchanges = append(exchanges, exchange{Method: method, Path: path, Status: res.StatusCode, Header: res.Header.Clone(), Body: body})
}

// recordedExchanges returns a copy of every exchange so far.
func recordedExchanges() []exchange {
	exchangesMu.Lock()
	defer exchangesMu.Unlock()
	return append([]exchange(nil), exchanges...)
}
