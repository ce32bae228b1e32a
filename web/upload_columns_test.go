package web

import (
	"bytes"
	"context"
	"fmt"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/url"
	"regexp"
	"strings"
	"testing"

	"github.com/xuri/excelize/v2"
)

// uploadNamed posts a lot file of the name to the upload page as the session's user.
func (e *testEnv) uploadNamed(t *testing.T, c *http.Cookie, name string, content []byte) *httptest.ResponseRecorder {
	t.Helper()
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	mw.WriteField("process", fmt.Sprint(e.proc.ID))
	fw, _ := mw.CreateFormFile("file", name)
	fw.Write(content)
	mw.Close()
	r := httptest.NewRequest("POST", "http://lotwatch.test/upload", &b)
	r.Header.Set("Content-Type", mw.FormDataContentType())
	r.Header.Set("Sec-Fetch-Site", "same-origin")
	r.AddCookie(c)
	rec := httptest.NewRecorder()
	e.h.ServeHTTP(rec, r)
	return rec
}

var (
	columnsKey = regexp.MustCompile(`action="/upload/([0-9a-f]+)/ignore"`)
	confirmKey = regexp.MustCompile(`action="/upload/([0-9a-f]+)"`)
)

// An unknown column (dnet beside the category dent) is refused on upload with the nearest name, and nothing is
// stored; the tick box ignores it on purpose for this file, and the lots
// are imported without it.
func TestUploadUnknownColumnIgnored(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "inspector1", testPassword)
	rec := e.uploadNamed(t, c, "lots.csv", []byte("lot;inspected;defective;dnet\nA;100;2;1\n"))
	body := rec.Body.String()
	k := columnsKey.FindStringSubmatch(body)
	if rec.Code != http.StatusBadRequest || k == nil || !strings.Contains(body, "did you mean dent?") || !strings.Contains(body, `name="ignore" value="dnet"`) {
		t.Fatalf("status %d, key %v\n%s", rec.Code, k, trim(body))
	}
	if strings.Contains(body, `formaction="/upload/`) {
		t.Error("an inspector is offered to keep a column map (an engineer's setting)")
	}
	if e.lotCount(t) != 0 {
		t.Fatal("a refused file stored lots")
	}
	rec = e.do(req{method: "POST", path: "/upload/" + k[1] + "/ignore", cookie: c, form: true, headers: sameOriginForm(), body: "ignore=dnet"})
	body = rec.Body.String()
	ck := confirmKey.FindStringSubmatch(body)
	if rec.Code != 200 || ck == nil || !strings.Contains(body, "ignored columns: dnet") {
		t.Fatalf("after ignoring: status %d\n%s", rec.Code, trim(body))
	}
	rec = e.do(req{method: "POST", path: "/upload/" + ck[1], cookie: c, form: true, headers: sameOriginForm()})
	if rec.Code != 200 || e.lotCount(t) != 1 {
		t.Fatalf("confirm: status %d, %d lots", rec.Code, e.lotCount(t))
	}
}

// An engineer maps the plant's headers once: the map is kept in the
// process (audited) and the plant's next file, an XLSX workbook, reads as
// it is kept.
func TestUploadColumnMapKept(t *testing.T) {
	e := newTestEnv(t)
	c := e.signIn(t, "engineer1", testPassword)
	rec := e.uploadNamed(t, c, "week1.csv", []byte("Batch,Qty inspected,Rejects,Dents\nB1,100,2,1\n"))
	body := rec.Body.String()
	k := columnsKey.FindStringSubmatch(body)
	if rec.Code != http.StatusBadRequest || k == nil || !strings.Contains(body, `formaction="/upload/`+k[1]+`/map"`) {
		t.Fatalf("status %d\n%s", rec.Code, trim(body))
	}
	form := url.Values{"header": {"Batch", "Qty inspected", "Rejects", "Dents"}, "target": {"lot", "inspected", "defective", "dent"}}
	rec = e.do(req{method: "POST", path: "/upload/" + k[1] + "/map", cookie: c, form: true, headers: sameOriginForm(), body: form.Encode()})
	body = rec.Body.String()
	ck := confirmKey.FindStringSubmatch(body)
	if rec.Code != 200 || ck == nil {
		t.Fatalf("after the map: status %d\n%s", rec.Code, trim(body))
	}
	p, err := e.db.Process(context.Background(), e.proc.ID)
	if err != nil {
		t.Fatal(err)
	}
	if p.ColumnMap["Qty inspected"] != "inspected" || p.ColumnMap["Dents"] != "dent" {
		t.Errorf("map kept: %v", p.ColumnMap)
	}
	entries, err := e.db.AuditFor(context.Background(), "process", e.proc.ID)
	if err != nil {
		t.Fatal(err)
	}
	last := entries[len(entries)-1]
	if last.Entity != "process" || !strings.Contains(last.New, `"column_map"`) || !strings.Contains(last.Reason, "week1.csv") {
		t.Errorf("last audit entry %+v", last)
	}
	// The next week's file, kept as a workbook, needs nothing more.
	f := excelize.NewFile()
	for i, row := range [][]any{{"Batch", "Qty inspected", "Rejects", "Dents"}, {"B2", 120, 3, 2}} {
		for j, v := range row {
			cell, _ := excelize.CoordinatesToCellName(j+1, i+1)
			f.SetCellValue("Sheet1", cell, v)
		}
	}
	var b bytes.Buffer
	f.Write(&b)
	rec = e.uploadNamed(t, c, "week2.xlsx", b.Bytes())
	if rec.Code != 200 || confirmKey.FindStringSubmatch(rec.Body.String()) == nil {
		t.Fatalf("week 2 workbook: status %d\n%s", rec.Code, trim(rec.Body.String()))
	}
}
