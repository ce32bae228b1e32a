package web

import (
	"errors"
	"net/http"
	"strconv"

	"lotwatch/store"
)

// statusOf is the HTTP status that answers err, for the pages and the
// API alike: a body over its limit 413, a database served read-only 503,
// something not found 404, a lot code stored with other values 409, bad
// input 400, anything else 500.
func statusOf(err error) int {
	var tooBig *http.MaxBytesError
	switch {
	case errors.As(err, &tooBig):
		return http.StatusRequestEntityTooLarge
	case errors.Is(err, store.ErrReadOnly):
		return http.StatusServiceUnavailable
	case errors.Is(err, store.ErrNotFound):
		return http.StatusNotFound
	case errors.Is(err, store.ErrConflict):
		return http.StatusConflict
	case errors.Is(err, store.ErrInvalid):
		return http.StatusBadRequest
	}
	return http.StatusInternalServerError
}

// fail answers err with statusOf(err): as JSON for the API, as a page
// otherwise. The message of a 4xx names what was wrong; a 500 is logged
// and answered without details.
func (s *Server) fail(w http.ResponseWriter, r *http.Request, err error) {
	status := statusOf(err)
	var msg, page string
	var tooBig *http.MaxBytesError
	switch {
	case status == http.StatusInternalServerError:
		s.log.Error("request failed", "method", r.Method, "path", r.URL.Path, "err", err)
		msg, page = "internal error; the server log has the details", "Something went wrong on the server; the server log has the details."
	case status == http.StatusServiceUnavailable:
		msg = "This database is served read-only (lotwatch cannot write its file): it can be read, but nothing can be changed."
	case errors.As(err, &tooBig):
		msg = "the request body is larger than " + strconv.FormatInt(tooBig.Limit, 10) + " bytes"
	default:
		msg = err.Error()
	}
	if isAPI(r) {
		writeError(w, status, msg)
		return
	}
	if page == "" {
		page = msg
	}
	s.pageError(w, r, status, page)
}
