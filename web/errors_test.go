package web

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"lotwatch/store"
)

// TestStatusOf is the table of the one mapping from errors to statuses.
// Each status is the one RFC 9110 (HTTP Semantics, §15) defines for the
// case: 400 a request the server will not process for a client error
// (§15.5.1), 401 no valid credentials (§15.5.2), 403 credentials that do
// not allow it (§15.5.4), 404 no such resource (§15.5.5), 405 a method
// the resource does not support (§15.5.6), 409 a conflict with the
// resource's current state (§15.5.10), 413 content larger than the
// server accepts (§15.5.14), 503 a server that cannot handle it for now
// (§15.6.4), 500 anything unexpected (§15.6.1); 429 is RFC 6585 §4.
func TestStatusOf(t *testing.T) {
	wrapped := func(err error) error { return fmt.Errorf("saving lot B7: %w", err) }
	for _, tc := range []struct {
		name string
		err  error
		want int
	}{
		{"store: bad input", store.ErrInvalid, 400},
		{"store: bad input, wrapped", wrapped(store.ErrInvalid), 400},
		{"store: validation problems", &store.ValidationError{Problems: []store.Problem{{Line: 2, Field: "inspected", Value: "-1", Reason: "is below 1"}}}, 400},
		{"web: bad input in words", invalid("lot id \"x\" is not a positive whole number"), 400},
		{"web: bad input of a parser", invalidBecause(errors.New("from: not a date")), 400},
		{"web: a form refused", errFormRefused, 400},
		{"web: problems of posted lots", &lotProblems{list: []apiProblem{{Field: "count", Value: "-1", Reason: "is negative"}}}, 400},
		{"web: no sign-in", refuse(errSignIn, "authentication required", ""), 401},
		{"web: a bad API token", errBadToken, 401},
		{"web: a role too low", refuse(errForbidden, "this needs the engineer role", ""), 403},
		{"store: not found", store.ErrNotFound, 404},
		{"store: not found, wrapped", wrapped(store.ErrNotFound), 404},
		{"web: no such page", refuse(store.ErrNotFound, "no such resource: /x", "There is no page at this address."), 404},
		{"web: a method not taken", refuse(errMethod, "method PUT is not allowed on /", ""), 405},
		{"store: a lot code stored with other values", wrapped(store.ErrConflict), 409},
		{"web: a retired process", refuse(store.ErrConflict, "Process P is retired: it takes no new lots.", ""), 409},
		{"web: a body over its limit", &http.MaxBytesError{Limit: 8 << 20}, 413},
		{"web: a body over its limit, as bad input", invalidBecause(wrapped(&http.MaxBytesError{Limit: 8 << 20})), 413},
		{"web: a file over its limit", refuse(errTooLarge, "The file is larger than 8 MiB.", ""), 413},
		{"web: too many attempts", refuse(errTooMany, "Too many attempts.", ""), 429},
		{"store: read-only database", wrapped(store.ErrReadOnly), 503},
		{"store: database server out of reach", wrapped(store.ErrUnavailable), 503},
		{"web: as many waiting uploads as kept", errBusy, 503},
		{"anything else", errors.New("disk I/O error"), 500},
	} {
		if got := statusOf(tc.err); got != tc.want {
			t.Errorf("%s: statusOf(%v) = %d, want %d", tc.name, tc.err, got, tc.want)
		}
	}
}

// TestFailAnswersPagesAndAPIAlike checks that fail gives a page and the
// API the same status, the API a JSON error naming what was wrong (with
// the list of problems when there is one), the page its own sentence, and
// that a 500 tells neither the details.
func TestFailAnswersPagesAndAPIAlike(t *testing.T) {
	e := newTestEnv(t)
	lp := &lotProblems{}
	lp.add(0, "count", "-1", "is negative")
	for _, tc := range []struct {
		name        string
		err         error
		status      int
		api, page   string
		apiProblems int
	}{
		{"not found", refuse(store.ErrNotFound, "no process with id 9", "There is no process with id 9."), 404, "no process with id 9", "There is no process with id 9.", 0},
		{"bad input", invalid("process id \"x\" is not a positive whole number"), 400, "process id \"x\" is not a positive whole number", "is not a positive whole number", 0},
		{"problems of posted lots", lp, 400, "invalid lot; nothing was stored: count", "invalid lot; nothing was stored", 1},
		{"problems of a posted cause", &fieldProblems{"the cause was not recorded: cause is empty", []apiProblem{{Field: "cause", Reason: "is empty"}}}, 400,
			"the cause was not recorded: cause is empty", "the cause was not recorded", 1},
		{"read-only database", fmt.Errorf("adding lot B7: %w", store.ErrReadOnly), 503, "This database is served read-only", "This database is served read-only", 0},
		{"busy", refuse(errBusy, "12 uploads are waiting for confirmation", ""), 503, "12 uploads are waiting for confirmation", "12 uploads are waiting for confirmation", 0},
		{"conflict", refuse(store.ErrConflict, "lot B7 is stored with other values", ""), 409, "lot B7 is stored with other values", "lot B7 is stored with other values", 0},
		{"internal", errors.New("database disk image is malformed"), 500, "internal error", "Something went wrong on the server", 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			api := httptest.NewRecorder()
			e.srv.fail(api, httptest.NewRequest("GET", "/api/v1/processes/9", nil), tc.err)
			page := httptest.NewRecorder()
			e.srv.fail(page, httptest.NewRequest("GET", "/processes/9", nil), tc.err)
			if api.Code != tc.status || page.Code != tc.status {
				t.Fatalf("API %d, page %d; want %d for both", api.Code, page.Code, tc.status)
			}
			var got apiError
			if err := json.Unmarshal(api.Body.Bytes(), &got); err != nil {
				t.Fatalf("the API's answer is not JSON: %v\n%s", err, api.Body)
			}
			if !strings.HasPrefix(got.Error, tc.api) || len(got.Problems) != tc.apiProblems {
				t.Errorf("API answer %+v, want the message %q and %d problems", got, tc.api, tc.apiProblems)
			}
			if ct := page.Header().Get("Content-Type"); !strings.HasPrefix(ct, "text/html") || !strings.Contains(page.Body.String(), tc.page) {
				t.Errorf("page (%s) does not say %q:\n%.600s", ct, tc.page, page.Body)
			}
			if tc.status == 500 && (strings.Contains(api.Body.String(), "malformed") || strings.Contains(page.Body.String(), "malformed")) {
				t.Error("a 500 tells the details")
			}
		})
	}
}
