package web

import (
	"errors"
	"fmt"
	"net/http"
	"strconv"

	"lotwatch/store"
)

// The web's own refusals, beside the store's errors; statusOf gives each
// its status.
var (
	errSignIn    = errors.New("authentication required")
	errForbidden = errors.New("forbidden")
	errMethod    = errors.New("method not allowed")
	errTooMany   = errors.New("too many attempts")
	errTooLarge  = errors.New("too large")
	errBusy      = errors.New("the server holds as much as it keeps")
)

// errFormRefused is a form refused for what is wrong in it (bad input,
// 400; a name or lot code already taken among them): the page shows the
// form again, saying what, with the values typed.
var errFormRefused = fmt.Errorf("the form was refused: %w", store.ErrInvalid)

// statusOf is the HTTP status that answers err, for the pages and the
// API alike: a body or file over its limit 413, a database served
// read-only or unreachable, or a server holding as many waiting uploads
// as it keeps 503,
// no sign-in 401, a role too low 403, something not found 404, a method
// the address does not take 405, a lot code stored with other values
// 409, too many attempts 429, bad input 400, anything else 500.
func statusOf(err error) int {
	var tooBig *http.MaxBytesError
	switch {
	case errors.As(err, &tooBig), errors.Is(err, errTooLarge):
		return http.StatusRequestEntityTooLarge
	case errors.Is(err, store.ErrReadOnly), errors.Is(err, errBusy), errors.Is(err, store.ErrUnavailable):
		return http.StatusServiceUnavailable
	case errors.Is(err, errSignIn):
		return http.StatusUnauthorized
	case errors.Is(err, errForbidden):
		return http.StatusForbidden
	case errors.Is(err, store.ErrNotFound):
		return http.StatusNotFound
	case errors.Is(err, errMethod):
		return http.StatusMethodNotAllowed
	case errors.Is(err, store.ErrConflict):
		return http.StatusConflict
	case errors.Is(err, errTooMany):
		return http.StatusTooManyRequests
	case errors.Is(err, store.ErrInvalid):
		return http.StatusBadRequest
	}
	return http.StatusInternalServerError
}

// problem is a request refused, in words: kind (a store or web error
// above) decides the status, api is the API's message and page the
// sentence of the error page (the API's message when empty); cause, when
// set, is the error behind it.
type problem struct {
	kind      error
	api, page string
	cause     error
}

func (p *problem) Error() string { return p.api }

func (p *problem) Unwrap() []error {
	if p.cause == nil {
		return []error{p.kind}
	}
	return []error{p.cause, p.kind}
}

// refuse is a request refused as kind, told as api to the API and as page
// on a page.
func refuse(kind error, api, page string) error {
	return &problem{kind: kind, api: api, page: page}
}

// invalid is bad input (400) told in msg, on pages and in the API alike.
func invalid(msg string) error { return &problem{kind: store.ErrInvalid, api: msg} }

// invalidBecause is bad input told in err's own words; a body over its
// limit stays a 413.
func invalidBecause(err error) error {
	return &problem{kind: store.ErrInvalid, api: err.Error(), cause: err}
}

// fieldProblems is bad input (400) found field by field: the API answers
// with the list and msg, a page with msg.
type fieldProblems struct {
	msg  string
	list []apiProblem
}

func (fp *fieldProblems) Error() string { return fp.msg }
func (fp *fieldProblems) Unwrap() error { return store.ErrInvalid }

// fail answers err with statusOf(err): as JSON for the API, as a page
// otherwise. The message of a 4xx names what was wrong (a list of
// problems, when err has them, goes into the API's answer whole); a 500
// is logged and answered without details.
func (s *Server) fail(w http.ResponseWriter, r *http.Request, err error) {
	status := statusOf(err)
	var msg, page string
	var tooBig *http.MaxBytesError
	var pr *problem
	switch {
	case status == http.StatusInternalServerError:
		s.log.Error("request failed", "method", r.Method, "path", r.URL.Path, "err", err)
		msg, page = "internal error; the server log has the details", "Something went wrong on the server; the server log has the details."
	case errors.Is(err, store.ErrUnavailable):
		s.log.Warn("the database server is unavailable", "method", r.Method, "path", r.URL.Path, "err", err)
		msg = "The database server cannot be reached just now; try again shortly."
	case errors.Is(err, store.ErrReadOnly):
		msg = "This database is served read-only (lotwatch cannot write its file): it can be read, but nothing can be changed."
	case errors.As(err, &tooBig):
		msg = "the request body is larger than " + strconv.FormatInt(tooBig.Limit, 10) + " bytes"
	default:
		msg = err.Error()
		if errors.As(err, &pr) {
			page = pr.page
		}
	}
	if isAPI(r) {
		var lp *lotProblems
		var fp *fieldProblems
		switch {
		case status == http.StatusBadRequest && errors.As(err, &lp):
			writeJSON(w, status, lp.answer())
			return
		case status == http.StatusBadRequest && errors.As(err, &fp):
			writeJSON(w, status, apiError{Error: fp.msg, Problems: fp.list})
			return
		}
		writeError(w, status, msg)
		return
	}
	if page == "" {
		page = msg
	}
	s.pageError(w, r, status, page)
}
