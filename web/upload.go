package web

import (
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/go-chi/chi/v5"

	"lotwatch/store"
	"lotwatch/store/lotcsv"
)

// uploadTTL is how long an uploaded file waits for its confirmation.
const uploadTTL = time.Hour

// maxUpload is the largest lot file the page takes (the request limit of
// the whole server is 8 MiB).
const maxUpload = 7 << 20

// Caps of the previews waiting for confirmation, each holding a file of
// up to maxUpload for uploadTTL: a user's newest previews are kept (the
// oldest gives way), and beyond the total a new preview is refused until
// one is confirmed or expires. Common practice, no source.
const (
	previewsPerUser = 3
	previewsTotal   = 50
)

// errTooManyPreviews refuses a preview over the total.
var errTooManyPreviews = errors.New("too many previews waiting")

// pendingUpload is an uploaded lot file kept on the server between the
// preview and the confirmation, bound to the session that uploaded it.
// The browser holds only the random key; the bytes imported are the bytes
// previewed.
type pendingUpload struct {
	path      string
	processID int64
	session   string
	user      string
	name      string
	created   time.Time
	order     uint64   // the order of upload, which decides the oldest when clock times tie
	ignore    []string // columns the user chose to skip on purpose
}

// uploads holds the pending uploads. Their files live in a folder of
// this server's own (dir, under previewRoot, named after the process),
// made at the first upload and removed when the server stops; folders of
// servers no longer running are removed when a server starts.
type uploads struct {
	mu       sync.Mutex
	pending  map[string]*pendingUpload
	dir      string
	maxTotal int
	uploaded uint64 // previews kept so far, numbering each one's order
}

// previewRoot is the folder holding every server's preview folder.
func previewRoot() string { return filepath.Join(os.TempDir(), "lotwatch-previews") }

// newUploads names this server's preview folder and removes the folders
// left by servers that are gone (stopped by kill -9 or a power cut).
func newUploads() (*uploads, error) {
	b := make([]byte, 4)
	if _, err := rand.Read(b); err != nil {
		return nil, err
	}
	root := previewRoot()
	ents, _ := os.ReadDir(root) // no folder yet is fine
	for _, e := range ents {
		pid, _, _ := strings.Cut(e.Name(), "-")
		if n, err := strconv.Atoi(pid); err == nil && !running(n) {
			os.RemoveAll(filepath.Join(root, e.Name()))
		}
	}
	return &uploads{dir: filepath.Join(root, strconv.Itoa(os.Getpid())+"-"+hex.EncodeToString(b)), maxTotal: previewsTotal}, nil
}

// running reports whether a process of that id runs (on Unix; elsewhere
// the folder of a running server may be removed early, and its previews
// must then be uploaded again).
func running(pid int) bool {
	p, err := os.FindProcess(pid)
	if err != nil {
		return false
	}
	err = p.Signal(syscall.Signal(0))
	return err == nil || errors.Is(err, syscall.EPERM)
}

// create makes an empty preview file in the server's folder.
func (u *uploads) create() (*os.File, error) {
	if err := os.MkdirAll(u.dir, 0o700); err != nil {
		return nil, err
	}
	return os.CreateTemp(u.dir, "lotwatch-upload-*.csv")
}

// removeAll forgets every preview and removes the server's folder (the
// server stops).
func (u *uploads) removeAll() {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.pending = nil
	os.RemoveAll(u.dir)
}

// put keeps a preview under a new random key. The user's oldest preview
// gives way when the user has previewsPerUser; errTooManyPreviews refuses
// it when maxTotal wait.
func (u *uploads) put(p *pendingUpload, now time.Time) (string, error) {
	b := make([]byte, 16)
	if _, err := rand.Read(b); err != nil {
		return "", err
	}
	key := hex.EncodeToString(b)
	u.mu.Lock()
	defer u.mu.Unlock()
	if u.pending == nil {
		u.pending = map[string]*pendingUpload{}
	}
	u.sweepLocked(now)
	var mine []string
	for k, q := range u.pending {
		if q.user == p.user {
			mine = append(mine, k)
		}
	}
	if len(mine) < previewsPerUser && len(u.pending) >= u.maxTotal {
		return "", errTooManyPreviews
	}
	sort.Slice(mine, func(i, j int) bool { return u.pending[mine[i]].order < u.pending[mine[j]].order })
	for _, k := range mine[:max(len(mine)-previewsPerUser+1, 0)] {
		os.Remove(u.pending[k].path)
		delete(u.pending, k)
	}
	u.uploaded++
	p.order = u.uploaded
	u.pending[key] = p
	return key, nil
}

// take removes and returns the upload of the key if this session made it.
func (u *uploads) take(key, session string, now time.Time) (*pendingUpload, bool) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.sweepLocked(now)
	p, ok := u.pending[key]
	if !ok || p.session != session {
		return nil, false
	}
	delete(u.pending, key)
	return p, true
}

func (u *uploads) sweepLocked(now time.Time) {
	for k, p := range u.pending {
		if now.Sub(p.created) > uploadTTL {
			os.Remove(p.path)
			delete(u.pending, k)
		}
	}
}

type uploadData struct {
	Processes []store.Process
	Selected  int64
	Problem   string
	// preview
	Proc      *store.Process
	FileName  string
	Key       string
	Rows      int
	New       int
	Unchanged int
	Conflicts []string
	Problems  []store.Problem
	More      int
	Sample    []lotcsv.Row
	Ignored   []string
	CountCol  string
	Cats      []string
	// unknown columns: the file waits under ColumnsKey for the user to
	// ignore them (tick boxes) or, for an engineer, to map them onto
	// Targets and keep the map in the process
	Unknown    []store.Problem
	ColumnsKey string
	Targets    []string
	CanMap     bool
	Others     []store.Problem // the header's other problems
	headerOnly bool            // the problems are the header's
	// result
	Result *store.ImportResult
}

func (s *Server) uploadPage(w http.ResponseWriter, r *http.Request) {
	ps, err := s.db.Processes(r.Context(), false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	sel, _ := strconv.ParseInt(r.URL.Query().Get("process"), 10, 64)
	s.render(w, r, http.StatusOK, "upload.html", "Upload a lot file", uploadData{Processes: ps, Selected: sel})
}

// postUpload keeps the uploaded file on the server and previews it: every
// row checked by the rules of the import (lotcsv for the cells,
// store.ValidateLot for the values, a code twice in the file), each
// problem with its line; lots already stored are counted as unchanged, or
// with other values are problems too (all or nothing). Nothing is saved until the preview is confirmed.
func (s *Server) postUpload(w http.ResponseWriter, r *http.Request) {
	ps, err := s.db.Processes(r.Context(), false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	d := uploadData{Processes: ps}
	// The form is shown again with what refused the upload, under its
	// status.
	again := func(err error) {
		d.Problem = err.Error()
		s.render(w, r, statusOf(err), "upload.html", "Upload a lot file", d)
	}
	if err := r.ParseMultipartForm(1 << 20); err != nil {
		var tooBig *http.MaxBytesError
		if errors.As(err, &tooBig) {
			again(refuse(errTooLarge, "The file is larger than the server accepts (8 MiB). Split it, or use `lotwatch import`.", ""))
			return
		}
		again(invalid("The upload could not be read: choose a process and a CSV file."))
		return
	}
	defer r.MultipartForm.RemoveAll()
	pid, _ := strconv.ParseInt(r.FormValue("process"), 10, 64)
	d.Selected = pid
	var proc *store.Process
	for i := range ps {
		if ps[i].ID == pid {
			proc = &ps[i]
		}
	}
	if proc == nil {
		again(invalid("Choose the process the lots belong to."))
		return
	}
	file, hdr, err := r.FormFile("file")
	if err != nil {
		again(invalid("Choose a CSV file to upload."))
		return
	}
	defer file.Close()
	tmp, err := s.uploads.create()
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	n, err := io.Copy(tmp, io.LimitReader(file, maxUpload+1))
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(tmp.Name())
		s.internalError(w, r, err)
		return
	}
	if n > maxUpload {
		os.Remove(tmp.Name())
		again(refuse(errTooLarge, fmt.Sprintf("The file is larger than %d MiB. Split it, or use `lotwatch import`.", maxUpload>>20), ""))
		return
	}
	d.Proc, d.FileName = proc, hdr.Filename
	s.previewAndKeep(w, r, &pendingUpload{path: tmp.Name(), processID: proc.ID, session: who(r).session, user: who(r).user.Name,
		name: hdr.Filename, created: s.now()}, *proc, d)
}

// previewAndKeep previews a kept file and answers with the preview. A file
// that passes waits for its confirmation; one whose only problems are
// unknown columns waits for the user to ignore or map them; any other
// problem drops it.
func (s *Server) previewAndKeep(w http.ResponseWriter, r *http.Request, pu *pendingUpload, p store.Process, d uploadData) {
	d.Proc, d.FileName = &p, pu.name
	if err := s.previewFile(r, pu.path, p, pu.ignore, &d); err != nil {
		os.Remove(pu.path)
		s.internalError(w, r, err)
		return
	}
	for _, pr := range d.Problems {
		if pr.UnknownColumn() {
			d.Unknown = append(d.Unknown, pr)
		} else {
			d.Others = append(d.Others, pr)
		}
	}
	// A header with unknown columns waits: mapping them may also supply
	// the columns found missing.
	onlyColumns := d.headerOnly && len(d.Unknown) > 0
	if (len(d.Problems) > 0 || d.Rows == 0) && !onlyColumns {
		os.Remove(pu.path)
		if d.Rows == 0 && len(d.Problems) == 0 {
			d.Problem = "The file has a header but no lots."
		}
		s.render(w, r, statusOf(errFormRefused), "upload.html", "Upload a lot file", d)
		return
	}
	key, err := s.uploads.put(pu, s.now())
	if errors.Is(err, errTooManyPreviews) {
		os.Remove(pu.path)
		d.Key, d.Sample, d.Problem = "", nil, fmt.Sprintf("%d uploads are waiting for confirmation on the server, the most it keeps. "+
			"Try again later: an upload waits at most an hour.", s.uploads.maxTotal)
		s.render(w, r, statusOf(errBusy), "upload.html", "Upload a lot file", d)
		return
	}
	if err != nil {
		os.Remove(pu.path)
		s.internalError(w, r, err)
		return
	}
	if onlyColumns {
		d.ColumnsKey, d.Targets = key, p.MapTargets()
		d.CanMap = who(r).user.Role.AtLeast(store.RoleEngineer)
		s.render(w, r, statusOf(errFormRefused), "upload.html", "Upload a lot file", d)
		return
	}
	d.Key = key
	s.render(w, r, http.StatusOK, "upload.html", "Upload a lot file", d)
}

// takeUpload takes the waiting upload of the path's key for this session
// and its process, or answers that it is gone.
func (s *Server) takeUpload(w http.ResponseWriter, r *http.Request) (*pendingUpload, store.Process, bool) {
	pu, ok := s.uploads.take(chi.URLParam(r, "key"), who(r).session, s.now())
	if !ok {
		s.fail(w, r, refuse(store.ErrNotFound, "This upload is no longer waiting (it was imported, it expired after an hour, or it belongs to another session). Upload the file again.", ""))
		return nil, store.Process{}, false
	}
	p, err := s.db.Process(r.Context(), pu.processID)
	if err != nil {
		os.Remove(pu.path)
		s.internalError(w, r, err)
		return nil, store.Process{}, false
	}
	return pu, p, true
}

// ignoreColumns previews a waiting upload again with the columns ticked
// to be skipped on purpose (for this file only).
func (s *Server) ignoreColumns(w http.ResponseWriter, r *http.Request) {
	pu, p, ok := s.takeUpload(w, r)
	if !ok {
		return
	}
	r.ParseForm()
	pu.ignore = append(pu.ignore, r.PostForm["ignore"]...)
	s.previewAndKeep(w, r, pu, p, uploadData{})
}

// mapColumns keeps the headers an engineer mapped onto lotwatch's columns
// or categories in the process's column map (recorded in the audit
// trail), so that the plant's next files read as they are, and previews
// the waiting upload again with it.
func (s *Server) mapColumns(w http.ResponseWriter, r *http.Request) {
	pu, p, ok := s.takeUpload(w, r)
	if !ok {
		return
	}
	r.ParseForm()
	pu.ignore = append(pu.ignore, r.PostForm["ignore"]...)
	heads, targets := r.PostForm["header"], r.PostForm["target"]
	m := map[string]string{}
	for k, v := range p.ColumnMap {
		m[k] = v
	}
	n := 0
	for i := range heads {
		if i < len(targets) && targets[i] != "" {
			m[heads[i]] = targets[i]
			n++
		}
	}
	d := uploadData{}
	if n == 0 {
		s.previewAndKeep(w, r, pu, p, d)
		return
	}
	np := p
	np.ColumnMap = m
	np, err := s.db.UpdateProcess(r.Context(), who(r).user.Name, "column map from the upload of "+pu.name, np)
	switch {
	case errors.Is(err, store.ErrInvalid):
		d.Problem = "The map was not kept: " + err.Error()
		np = p
	case err != nil:
		os.Remove(pu.path)
		s.internalError(w, r, err)
		return
	}
	s.previewAndKeep(w, r, pu, np, d)
}

// previewSample is how many rows the preview shows.
const previewSample = 8

func (s *Server) previewFile(r *http.Request, path string, p store.Process, ignore []string, d *uploadData) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	const max = 100
	add := func(pr store.Problem) {
		if len(d.Problems) < max {
			d.Problems = append(d.Problems, pr)
		} else {
			d.More++
		}
	}
	ropt := p.ReadOptions()
	ropt.MaxProblems, ropt.Ignore = max, ignore
	rd, err := lotcsv.NewReader(f, ropt)
	var hps lotcsv.Problems
	if errors.As(err, &hps) {
		for _, pr := range hps {
			add(store.Problem(pr))
		}
		d.headerOnly = true
		return nil
	}
	if err != nil {
		return err
	}
	d.Ignored, d.CountCol, d.Cats = rd.Ignored(), rd.CountColumn(), rd.Categories()
	pc, err := s.freshChart(r.Context(), p)
	if err != nil {
		return err
	}
	stored := make(map[string]store.Lot, len(pc.lots))
	for _, l := range pc.lots {
		stored[l.Lot] = l
	}
	seen := map[string]int{}
	for {
		row, err := rd.Next()
		if err == io.EOF {
			break
		}
		var rps lotcsv.Problems
		if errors.As(err, &rps) {
			d.Rows++
			for _, pr := range rps {
				add(store.Problem(pr))
			}
			continue
		}
		if err != nil {
			return err
		}
		d.Rows++
		in := store.LotInput{Lot: row.Lot, Time: row.Time, Shift: row.Shift, Inspected: row.Inspected, Count: row.Count,
			Categories: row.Categories, Inspector: row.Inspector, Note: row.Note}
		bad := false
		for _, pr := range store.ValidateLot(p, in) {
			if pr.Field == "defective" || pr.Field == "defects" {
				pr.Field = rd.CountColumn()
			}
			pr.Line, pr.Sheet = row.Line, rd.Sheet()
			add(pr)
			bad = true
		}
		if first, dup := seen[row.Lot]; dup {
			add(store.Problem{Line: row.Line, Sheet: rd.Sheet(), Field: "lot", Value: row.Lot, Reason: fmt.Sprintf("appears more than once in the file (first on line %d)", first)})
			bad = true
		}
		seen[row.Lot] = row.Line
		if bad {
			continue
		}
		if len(d.Sample) < previewSample {
			d.Sample = append(d.Sample, row)
		}
		if l, ok := stored[row.Lot]; ok {
			if l.Inspected == row.Inspected && l.Count == row.Count && (!rd.Has(lotcsv.ColTime) || l.Time.Equal(row.Time)) {
				d.Unchanged++
			} else {
				add(store.Problem{Line: row.Line, Field: "lot", Value: row.Lot, Reason: store.StoredOtherwise + "; a stored lot is changed by correcting it, which keeps its history"})
			}
			continue
		}
		d.New++
	}
	return nil
}

// confirmUpload imports the previewed file with the store's import (all
// or nothing; it checks everything again).
func (s *Server) confirmUpload(w http.ResponseWriter, r *http.Request) {
	pu, p, ok := s.takeUpload(w, r)
	if !ok {
		return
	}
	defer os.Remove(pu.path)
	f, err := os.Open(pu.path)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	defer f.Close()
	res, err := s.db.Import(r.Context(), who(r).user.Name, f, store.ImportOptions{Process: p.Name, Ignore: pu.ignore})
	d := uploadData{Proc: &p, FileName: pu.name}
	var ve *store.ValidationError
	switch {
	case errors.As(err, &ve):
		d.Problems, d.More = ve.Problems, ve.More
		d.Problem = "Nothing was imported: the file no longer passes the checks."
		s.render(w, r, statusOf(errFormRefused), "upload.html", "Upload a lot file", d)
		return
	case errors.Is(err, store.ErrInvalid):
		d.Problem = "Nothing was imported: " + err.Error()
		s.render(w, r, statusOf(err), "upload.html", "Upload a lot file", d)
		return
	case err != nil:
		s.internalError(w, r, err)
		return
	}
	d.Result = &res
	s.obs.LotsAccepted("upload", res.Added)
	for _, c := range res.Conflicts {
		d.Conflicts = append(d.Conflicts, c.String())
	}
	s.render(w, r, http.StatusOK, "upload.html", "Upload a lot file", d)
}
