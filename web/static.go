package web

import (
	"bytes"
	"crypto/sha256"
	"embed"
	"encoding/hex"
	"io/fs"
	"mime"
	"net/http"
	"path"
	"strings"
	"time"
)

// staticFS holds the files served under /static/: the vendored ECharts
// 5.4.3 build (dist/echarts.min.js from the npm package echarts@5.4.3)
// with its licence, the chart start-up script and the style sheet. Pages
// load nothing from any other origin.
//
//go:embed static
var staticFS embed.FS

// staticFile is one embedded asset with its content hash, which is added to
// its URL so that it can be cached for a year and still change with a new
// build.
type staticFile struct {
	name    string
	body    []byte
	ctype   string
	version string
}

// staticFiles maps a file name under /static/ to the file.
var staticFiles = loadStatic()

func loadStatic() map[string]*staticFile {
	files := map[string]*staticFile{}
	err := fs.WalkDir(staticFS, "static", func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		body, err := staticFS.ReadFile(p)
		if err != nil {
			return err
		}
		sum := sha256.Sum256(body)
		name := strings.TrimPrefix(p, "static/")
		ctype := mime.TypeByExtension(path.Ext(name))
		if ctype == "" {
			ctype = "application/octet-stream"
		}
		if strings.HasSuffix(name, ".txt") {
			ctype = "text/plain; charset=utf-8"
		}
		files[name] = &staticFile{name: name, body: body, ctype: ctype, version: hex.EncodeToString(sum[:6])}
		return nil
	})
	if err != nil {
		panic("web: reading embedded static files: " + err.Error())
	}
	return files
}

// assetURL returns the versioned URL of a static file, for templates.
func assetURL(name string) string {
	f, ok := staticFiles[name]
	if !ok {
		panic("web: no static file " + name)
	}
	return "/static/" + name + "?v=" + f.version
}

// serveStatic serves an embedded file. A request carrying the file's
// current version may be cached for a year; any other is revalidated.
func serveStatic(w http.ResponseWriter, r *http.Request) {
	name := strings.TrimPrefix(r.URL.Path, "/static/")
	f, ok := staticFiles[name]
	if !ok {
		http.NotFound(w, r)
		return
	}
	h := w.Header()
	h.Set("Content-Type", f.ctype)
	h.Set("ETag", `"`+f.version+`"`)
	if r.URL.Query().Get("v") == f.version {
		h.Set("Cache-Control", "public, max-age=31536000, immutable")
	} else {
		h.Set("Cache-Control", "public, max-age=3600")
	}
	http.ServeContent(w, r, "", time.Time{}, bytes.NewReader(f.body))
}
