package web

import (
	"encoding/json"
	"math"
	"net/http"
	"strings"

	"lotwatch/spc/chartjson"
)

// isAPI reports whether the request is for the JSON API, whose errors are
// JSON and whose callers are not redirected to the sign-in page.
func isAPI(r *http.Request) bool {
	return r.URL.Path == "/api" || strings.HasPrefix(r.URL.Path, "/api/")
}

// apiError is the body of every API error response. At most
// maxAPIProblems problems are listed; More counts the rest, so that a
// body with a million bad fields gets a small answer.
type apiError struct {
	Error    string       `json:"error"`
	Problems []apiProblem `json:"problems,omitempty"`
	More     int          `json:"more,omitempty"`
}

// maxAPIProblems is the most problems an error answer lists, as many as
// the upload preview shows.
const maxAPIProblems = 100

// apiProblem is one thing wrong with one field of a request. Index is the
// position of the lot in a posted array (0 for a single object).
type apiProblem struct {
	Index  *int   `json:"index,omitempty"`
	Field  string `json:"field"`
	Value  string `json:"value,omitempty"`
	Reason string `json:"reason"`
}

// writeJSON writes v as the response body with the given status.
func writeJSON(w http.ResponseWriter, status int, v any) {
	body, err := json.Marshal(v)
	if err != nil {
		status = http.StatusInternalServerError
		body = []byte(`{"error":"internal error: the response could not be encoded"}`)
	}
	h := w.Header()
	h.Set("Content-Type", "application/json; charset=utf-8")
	h.Set("Cache-Control", "no-store")
	w.WriteHeader(status)
	w.Write(body)
	w.Write([]byte("\n"))
}

// writeError writes {"error": msg} with the given status.
func writeError(w http.ResponseWriter, status int, msg string) {
	writeJSON(w, status, apiError{Error: msg})
}

// Num is the analysis's JSON number (NaN and ±Inf as null), so that
// every number the API shows is written the same way.
type Num = chartjson.Num

// nan marks a number that is not defined (a lot not on the chart).
var nan = math.NaN()
