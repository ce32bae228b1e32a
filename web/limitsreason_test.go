package web

import (
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"testing"
)

// TestRecomputeNeedsReasonAndRecordsCause: Recompute, like Freeze, leaves
// a lot out of the baseline only with a reason; the reason can be
// recorded as the lot's assignable cause in the same step as the freeze;
// the page compares sigma, exact and Laney limits of the same baseline.
func TestRecomputeNeedsReasonAndRecordsCause(t *testing.T) {
	e := newTestEnv(t)
	lots := e.addLots(t, 25, func(i int) int64 { return int64(2 + i%4 + 30*btoi(i == 7)) })
	c := e.signIn(t, "engineer1", testPassword)
	path := fmt.Sprintf("/processes/%d/limits", e.proc.ID)
	code := lots[7].Lot

	// No reason: the lot stays in the estimate (25 lots), and the row says why.
	rec := e.do(req{method: "GET", path: path + "?" + url.Values{"ex": {code}, "why:" + code: {""}}.Encode(), cookie: c})
	body := rec.Body.String()
	if rec.Code != 200 || strings.Contains(body, "24 in the estimate") || !strings.Contains(body, "it stays in the estimate until then") {
		t.Errorf("recompute without a reason: status %d, lot left out or no problem shown", rec.Code)
	}
	// With a reason: 24 lots in the estimate.
	rec = e.do(req{method: "GET", path: path + "?" + url.Values{"ex": {code}, "why:" + code: {"die change"}}.Encode(), cookie: c})
	body = rec.Body.String()
	if !strings.Contains(body, "24 in the estimate") {
		t.Error("recompute with a reason does not leave the lot out")
	}
	for _, want := range []string{"The same baseline by each limit method", "sigma <strong>(this process's method)</strong>", "<td>exact", "<td>laney"} {
		if !strings.Contains(body, want) {
			t.Errorf("limits page lacks %q", want)
		}
	}
	// Freeze with the reason recorded as the lot's cause.
	form := url.Values{"ex": {code}, "why:" + code: {"die change"}, "cause:" + code: {"1"}, "reason": {"first baseline"}}
	rec = e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(), body: form.Encode()})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("freeze: status %d", rec.Code)
	}
	anns, err := e.db.Annotations(t.Context(), e.proc.ID)
	if err != nil || len(anns) != 1 || anns[0].LotID != lots[7].ID || anns[0].Cause != "die change" || anns[0].By != "engineer1" {
		t.Errorf("annotations %+v, %v; want the reason as the cause of %s", anns, err, code)
	}
}

// TestMethodChangeSaysWhatItChanges: saving a process with another limit
// method says that the trial limits and the next frozen set use it, and
// that frozen sets keep theirs.
func TestMethodChangeSaysWhatItChanges(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "engineer1", testPassword)
	form := url.Values{}
	for k, v := range processValues(e.proc) {
		form.Set(k, v)
	}
	form.Set("method", "exact")
	form.Set("reason", "few nonconforming per lot")
	path := fmt.Sprintf("/processes/%d/settings", e.proc.ID)
	rec := e.do(req{method: "POST", path: path, cookie: c, form: true, headers: sameOriginForm(), body: form.Encode()})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("save: status %d", rec.Code)
	}
	body := e.do(req{method: "GET", path: rec.Header().Get("Location"), cookie: c}).Body.String()
	for _, want := range []string{"changed from sigma to exact", "the next limit set you freeze", "keep the method they were frozen with"} {
		if !strings.Contains(body, want) {
			t.Errorf("settings page after the change lacks %q", want)
		}
	}
}

// TestPlantZoneForNewProcesses: the new-process form starts with the
// plant's time zone once an engineer sets it.
func TestPlantZoneForNewProcesses(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "engineer1", testPassword)
	form := url.Values{"tz": {"Europe/Warsaw"}, "reason": {"the plant is in Poznań"}}
	rec := e.do(req{method: "POST", path: "/settings/plant", cookie: c, form: true, headers: sameOriginForm(), body: form.Encode()})
	if rec.Code != http.StatusSeeOther {
		t.Fatalf("set zone: status %d", rec.Code)
	}
	body := e.do(req{method: "GET", path: "/settings/processes", cookie: c}).Body.String()
	if !strings.Contains(body, `name="tz" type="text" value="Europe/Warsaw"`) || !strings.Contains(body, "<strong>Europe/Warsaw</strong>") {
		t.Error("the new-process form does not start with the plant's zone")
	}
	rec = e.do(req{method: "POST", path: "/settings/plant", cookie: c, form: true, headers: sameOriginForm(), body: url.Values{"tz": {"Nowhere/Else"}, "reason": {"x"}}.Encode()})
	if rec.Code != http.StatusBadRequest || !strings.Contains(rec.Body.String(), "Nowhere/Else") {
		t.Errorf("bad zone: status %d", rec.Code)
	}
}
