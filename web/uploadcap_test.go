package web

import (
	"bytes"
	"context"
	"fmt"
	"mime/multipart"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// uploadFile posts a lot file to the upload page and returns the answer.
func (e *testEnv) uploadFile(cookie *http.Cookie, content string) *httptest.ResponseRecorder {
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	mw.WriteField("process", fmt.Sprint(e.proc.ID))
	fw, _ := mw.CreateFormFile("file", "lots.csv")
	fw.Write([]byte(content))
	mw.Close()
	r := httptest.NewRequest("POST", "http://lotwatch.test/upload", &b)
	r.Header.Set("Content-Type", mw.FormDataContentType())
	r.Header.Set("Sec-Fetch-Site", "same-origin")
	r.AddCookie(cookie)
	rec := httptest.NewRecorder()
	e.h.ServeHTTP(rec, r)
	return rec
}

// confirmAction is the confirmation form's address on a preview page.
func confirmAction(t *testing.T, rec *httptest.ResponseRecorder) string {
	t.Helper()
	body := rec.Body.String()
	i := strings.Index(body, `action="/upload/`)
	if rec.Code != http.StatusOK || i < 0 {
		t.Fatalf("preview: status %d, no confirmation form", rec.Code)
	}
	action := body[i+len(`action="`):]
	return action[:strings.IndexByte(action, '"')]
}

// previewFiles counts the files the server keeps for previews.
func previewFiles(t *testing.T, s *Server) int {
	t.Helper()
	ents, err := os.ReadDir(s.uploads.dir)
	if os.IsNotExist(err) {
		return 0
	}
	if err != nil {
		t.Fatal(err)
	}
	return len(ents)
}

// TestUploadPreviewCap: a user's previews waiting for confirmation are
// capped (the oldest gives way to the newest), and so are all users'
// together (a new preview is then refused until one is confirmed or
// expires). Before the cap each preview kept its file for an hour, with
// no bound.
func TestUploadPreviewCap(t *testing.T) {
	e := newTestEnv(t)
	kim := e.signIn(t, "inspector1", testPassword)
	var actions []string
	for i := range previewsPerUser + 3 {
		rec := e.uploadFile(kim, fmt.Sprintf("lot,inspected,defective\nK%d,100,2\n", i))
		actions = append(actions, confirmAction(t, rec))
	}
	if n := previewFiles(t, e.srv); n != previewsPerUser {
		t.Errorf("%d preview files kept for one user, want %d", n, previewsPerUser)
	}
	if rec := e.do(req{method: "POST", path: actions[0], cookie: kim, form: true, headers: sameOriginForm()}); rec.Code != http.StatusNotFound {
		t.Errorf("the oldest preview, beyond the cap, was still confirmed: %d", rec.Code)
	}
	last := actions[len(actions)-1]
	if rec := e.do(req{method: "POST", path: last, cookie: kim, form: true, headers: sameOriginForm()}); rec.Code != http.StatusOK || e.lotCount(t) != 1 {
		t.Fatalf("the newest preview: %d, %d lots stored", rec.Code, e.lotCount(t))
	}

	// All users together: another user is refused once the total is reached.
	e.srv.uploads.maxTotal = previewsPerUser
	for i := range previewsPerUser {
		confirmAction(t, e.uploadFile(kim, fmt.Sprintf("lot,inspected,defective\nM%d,100,2\n", i)))
	}
	eng := e.signIn(t, "engineer1", testPassword)
	rec := e.uploadFile(eng, "lot,inspected,defective\nE1,100,2\n")
	if rec.Code != http.StatusServiceUnavailable || !strings.Contains(rec.Body.String(), "waiting") {
		t.Errorf("a preview over the total: %d, want 503 saying how many wait", rec.Code)
	}
	if n := previewFiles(t, e.srv); n != previewsPerUser {
		t.Errorf("%d preview files after the refused one, want %d", n, previewsPerUser)
	}
}

// TestUploadPreviewsRemovedAtStartAndStop: previews left by a server that
// is gone are removed when a server starts, and a server removes its own
// when it stops.
func TestUploadPreviewsRemovedAtStartAndStop(t *testing.T) {
	root := t.TempDir()
	t.Setenv("TMPDIR", root)
	// A folder of a server process that no longer runs.
	gone := exec.Command("true")
	if err := gone.Run(); err != nil {
		t.Skipf("cannot run a short-lived process: %v", err)
	}
	orphan := filepath.Join(previewRoot(), strconv.Itoa(gone.Process.Pid)+"-deadbeef")
	if err := os.MkdirAll(orphan, 0o700); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(orphan, "lotwatch-upload-1.csv"), []byte("lot\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	e := newTestEnv(t)
	if _, err := os.Stat(orphan); !os.IsNotExist(err) {
		t.Errorf("the previews of a server that is gone were left: %v", err)
	}
	kim := e.signIn(t, "inspector1", testPassword)
	confirmAction(t, e.uploadFile(kim, "lot,inspected,defective\nS1,100,2\n"))
	if previewFiles(t, e.srv) != 1 {
		t.Fatal("the preview was not kept")
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, stop := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- e.srv.Serve(ctx, ln) }()
	stop()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(e.srv.uploads.dir); !os.IsNotExist(err) {
		t.Errorf("the server's previews were left after it stopped: %v", err)
	}
}
