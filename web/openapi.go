package web

import (
	_ "embed"
	"net/http"
)

// openAPIDoc is the OpenAPI 3.1 description of /api/v1, written by hand
// and checked by TestOpenAPI against the route table, its own examples
// and the server's real answers.
//
//go:embed openapi.json
var openAPIDoc []byte

// apiOpenAPI serves the API's description, to anyone: stations'
// integrators read it before they have a token.
func (s *Server) apiOpenAPI(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-cache")
	w.Write(openAPIDoc)
}
