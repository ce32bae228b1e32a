package web

import (
	"bytes"
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"
	"testing"

	"github.com/santhosh-tekuri/jsonschema/v6"

	"lotwatch/store"
)

// openAPIBase is where the tests file the document for the JSON Schema
// compiler (never fetched).
const openAPIBase = "https://lotwatch.invalid/openapi.json"

// openAPI parses the embedded document and returns it with a compiler of
// its schemas. OpenAPI 3.1 schemas are JSON Schema draft 2020-12
// (OpenAPI Specification 3.1.0, section 4.8.24), which
// santhosh-tekuri/jsonschema implements and checks against the official
// test suite.
func openAPI(t *testing.T) (map[string]any, func(ptr string) *jsonschema.Schema) {
	t.Helper()
	raw, err := jsonschema.UnmarshalJSON(bytes.NewReader(openAPIDoc))
	if err != nil {
		t.Fatalf("openapi.json is not JSON: %v", err)
	}
	c := jsonschema.NewCompiler()
	c.DefaultDraft(jsonschema.Draft2020)
	c.AssertFormat()
	if err := c.AddResource(openAPIBase, raw); err != nil {
		t.Fatal(err)
	}
	compiled := map[string]*jsonschema.Schema{}
	return raw.(map[string]any), func(ptr string) *jsonschema.Schema {
		t.Helper()
		if s, ok := compiled[ptr]; ok {
			return s
		}
		s, err := c.Compile(openAPIBase + "#" + ptr)
		if err != nil {
			t.Fatalf("schema %s: %v", ptr, err)
		}
		compiled[ptr] = s
		return s
	}
}

// apiRoutes are the "METHOD /path" of every /api/v1 route the server has.
func apiRoutes(t *testing.T) map[string]bool {
	e := newTestEnv(t)
	out := map[string]bool{}
	for _, rt := range e.srv.routes() {
		if strings.HasPrefix(rt.pattern, "/api/v1/") {
			out[rt.method+" "+rt.pattern] = true
		}
	}
	return out
}

// docRoutes are the "METHOD /path" the document describes.
func docRoutes(doc map[string]any) map[string]bool {
	out := map[string]bool{}
	for path, item := range doc["paths"].(map[string]any) {
		for method := range item.(map[string]any) {
			switch method {
			case "get", "put", "post", "delete", "patch", "head", "options", "trace":
				out[strings.ToUpper(method)+" "+path] = true
			}
		}
	}
	return out
}

// The document is OpenAPI 3.1 and describes every /api/v1 route of the
// route table, and nothing else. A route added to the table without its
// description fails here.
func TestOpenAPIRoutes(t *testing.T) {
	doc, _ := openAPI(t)
	if v, _ := doc["openapi"].(string); !strings.HasPrefix(v, "3.1.") {
		t.Errorf("openapi %q, want 3.1.x", v)
	}
	have, want := docRoutes(doc), apiRoutes(t)
	for r := range want {
		if !have[r] {
			t.Errorf("route %s is not in web/openapi.json: describe it", r)
		}
	}
	for r := range have {
		if !want[r] {
			t.Errorf("web/openapi.json describes %s, which the server does not have", r)
		}
	}
}

// Every example of the document validates against the schema it is
// given for.
func TestOpenAPIExamples(t *testing.T) {
	doc, schema := openAPI(t)
	schemas := doc["components"].(map[string]any)["schemas"].(map[string]any)
	n := 0
	for name, s := range schemas {
		exs, _ := s.(map[string]any)["examples"].([]any)
		for i, ex := range exs {
			n++
			if err := schema("/components/schemas/" + name).Validate(ex); err != nil {
				t.Errorf("example %d of %s: %v", i, name, err)
			}
		}
	}
	if n < 10 {
		t.Errorf("%d examples checked; the document has more", n)
	}
	// A wrong example must fail: the check can tell.
	if err := schema("/components/schemas/LotInput").Validate(map[string]any{"lot": "A", "inspected": json.Number("10"), "defective": json.Number("1"), "defects": json.Number("1")}); err == nil {
		t.Error("a lot with both defective and defects passes LotInput")
	}
}

// responseSchema is the pointer of the JSON schema of the answer with the
// status to METHOD path, following a $ref to components/responses.
func responseSchema(t *testing.T, doc map[string]any, method, path string, status int) string {
	t.Helper()
	op, ok := doc["paths"].(map[string]any)[path].(map[string]any)[strings.ToLower(method)].(map[string]any)
	if !ok {
		t.Fatalf("no %s %s in the document", method, path)
	}
	code := strconv.Itoa(status)
	resp, ok := op["responses"].(map[string]any)[code].(map[string]any)
	if !ok {
		t.Fatalf("%s %s: status %d is not in the document", method, path, status)
		return ""
	}
	ptr := "/paths/" + strings.NewReplacer("~", "~0", "/", "~1").Replace(path) + "/" + strings.ToLower(method) + "/responses/" + code
	if ref, ok := resp["$ref"].(string); ok {
		ptr = strings.TrimPrefix(ref, "#")
	}
	return ptr + "/content/application~1json/schema"
}

// The server's real answers, success and refusal, validate against the
// response schemas of the document; every /api/v1 route is called.
func TestOpenAPIAnswers(t *testing.T) {
	doc, schema := openAPI(t)
	e := newTestEnv(t)
	lots := e.addLots(t, 30, func(i int) int64 {
		if i == 25 {
			return 30 // far above the rest: out of limits
		}
		return int64(3 + i%3)
	})
	if _, err := e.db.FreezeLimitSet(t.Context(), "engineer1", store.LimitSet{ProcessID: e.proc.ID, Method: "sigma", K: 3, Center: 0.02, SigmaZ: 1,
		BaselineFrom: lots[0].Time, BaselineTo: lots[19].Time, BaselineLots: 20, EffectiveFrom: lots[20].Time, Reason: "baseline of the first 20 lots"}); err != nil {
		t.Fatal(err)
	}
	id := strconv.FormatInt(e.proc.ID, 10)
	admin, inspector := e.tokens[store.RoleAdmin], e.tokens[store.RoleInspector]
	viewer := e.tokens[store.RoleViewer]
	calls := []struct {
		method, pattern, path, token, body string
		status                             int
	}{
		{"GET", "/api/v1/openapi.json", "/api/v1/openapi.json", "", "", 200},
		{"GET", "/api/v1/me", "/api/v1/me", viewer, "", 200},
		{"GET", "/api/v1/me", "/api/v1/me", "", "", 401},
		{"GET", "/api/v1/processes", "/api/v1/processes?retired=1", viewer, "", 200},
		{"GET", "/api/v1/processes/{id}", "/api/v1/processes/" + id, viewer, "", 200},
		{"GET", "/api/v1/processes/{id}", "/api/v1/processes/999999", viewer, "", 404},
		{"GET", "/api/v1/processes/{id}", "/api/v1/processes/x", viewer, "", 400},
		{"GET", "/api/v1/processes/{id}/chart", "/api/v1/processes/" + id + "/chart", viewer, "", 200},
		{"GET", "/api/v1/processes/{id}/chart", "/api/v1/processes/" + id + "/chart?from=yesterday", viewer, "", 400},
		{"GET", "/api/v1/processes/{id}/chart", "/api/v1/processes/" + id + "/chart?limit=10", viewer, "", 200},
		{"GET", "/api/v1/processes/{id}/lots", "/api/v1/processes/" + id + "/lots", viewer, "", 200},
		{"POST", "/api/v1/processes/{id}/lots", "/api/v1/processes/" + id + "/lots", inspector, `{"lot":"OA-1","inspected":200,"defective":3,"categories":{"scratch":2}}`, 201},
		{"POST", "/api/v1/processes/{id}/lots", "/api/v1/processes/" + id + "/lots", inspector, `[{"lot":"OA-2","inspected":200,"defective":1},{"lot":"OA-3","inspected":0,"defective":1}]`, 400},
		{"POST", "/api/v1/processes/{id}/lots", "/api/v1/processes/" + id + "/lots", inspector, `{"lot":"OA-1","inspected":200,"defective":4}`, 409},
		{"POST", "/api/v1/processes/{id}/lots", "/api/v1/processes/" + id + "/lots", viewer, `{"lot":"OA-9","inspected":200,"defective":4}`, 403},
		{"GET", "/api/v1/processes/{id}/signals", "/api/v1/processes/" + id + "/signals", viewer, "", 200},
		{"GET", "/api/v1/processes/{id}/limits", "/api/v1/processes/" + id + "/limits", viewer, "", 200},
		{"POST", "/api/v1/processes/{id}/lots/{lot}/causes", "/api/v1/processes/" + id + "/lots/" + url.PathEscape(lots[25].Lot) + "/causes", inspector, `{"cause":"worn die","action":"die replaced"}`, 201},
		{"POST", "/api/v1/processes/{id}/lots/{lot}/causes", "/api/v1/processes/" + id + "/lots/NOPE/causes", inspector, `{"cause":"worn die","action":"die replaced"}`, 404},
		{"POST", "/api/v1/processes/{id}/lots/{lot}/causes", "/api/v1/processes/" + id + "/lots/" + url.PathEscape(lots[24].Lot) + "/causes", inspector, `{"colour":"red"}`, 400},
		{"GET", "/api/v1/attention", "/api/v1/attention", viewer, "", 200},
		{"GET", "/api/v1/users", "/api/v1/users", admin, "", 200},
		{"GET", "/api/v1/users", "/api/v1/users", viewer, "", 403},
	}
	called := map[string]bool{}
	for _, c := range calls {
		rec := e.do(req{method: c.method, path: c.path, token: c.token, body: c.body})
		name := fmt.Sprintf("%s %s", c.method, c.path)
		if rec.Code != c.status {
			t.Errorf("%s: status %d, want %d\n%s", name, rec.Code, c.status, trim(rec.Body.String()))
			continue
		}
		if ct := rec.Header().Get("Content-Type"); !strings.HasPrefix(ct, "application/json") {
			t.Errorf("%s: Content-Type %q", name, ct)
		}
		v, err := jsonschema.UnmarshalJSON(bytes.NewReader(rec.Body.Bytes()))
		if err != nil {
			t.Errorf("%s: answer is not JSON: %v", name, err)
			continue
		}
		if err := schema(responseSchema(t, doc, c.method, c.pattern, c.status)).Validate(v); err != nil {
			t.Errorf("%s (%d): the answer does not fit the document: %v\n%s", name, c.status, err, trim(rec.Body.String()))
		}
		called[c.method+" "+c.pattern] = true
	}
	var missed []string
	for r := range apiRoutes(t) {
		if !called[r] {
			missed = append(missed, r)
		}
	}
	sort.Strings(missed)
	if len(missed) > 0 {
		t.Errorf("routes not called, so their answers are not checked: %v", missed)
	}
	// The document is served to anyone as it is embedded.
	rec := e.do(req{method: "GET", path: "/api/v1/openapi.json"})
	if rec.Code != http.StatusOK || !bytes.Equal(rec.Body.Bytes(), openAPIDoc) {
		t.Errorf("GET /api/v1/openapi.json without sign-in: %d", rec.Code)
	}
}
