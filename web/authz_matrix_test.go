package web

import (
	"bytes"
	"context"
	"fmt"
	"mime/multipart"
	"net/http"
	"net/url"
	"regexp"
	"strings"
	"testing"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/store/storetest"
)

// authzRoute is the expectation for one route of the table: the least
// role the project's role model gives it, a request that succeeds for a
// caller who may use it, and the status of that success.
//
// The role model (README, DEVELOPERS.md, `lotwatch user -h`, the doc
// comment of Server.routes): a viewer reads; an inspector also logs lots
// and annotates; an engineer also manages processes and limit sets; an
// admin also manages users and tokens. Sign-in, static files, the review's
// style sheet and the health check are open.
type authzRoute struct {
	min    store.Role // anyone for open routes
	path   string     // with {id} filled in by the test
	body   string     // for POST; "lot" gets a fresh lot object per call
	form   bool
	ok     int // status for a caller who may use the route
	signed int // status for a signed-in caller on an open route, if it differs
	// writes: the successful request records a change in the audit
	// trail (checked, so that the success is a real one); a refused
	// request must leave the trail as it was.
	writes bool
	// setup, when set, makes the fixtures one request needs (a lot, an
	// annotation, a user, a token, an upload waiting for who's session)
	// and returns the request's path and body; it replaces path and body.
	setup func(m *matrixEnv, t *testing.T, who caller) sent
}

// sent is the path, body and content type of one request of the matrix.
type sent struct {
	path, body string
	ctype      string // overrides the form or JSON content type
}

// authzRoutes must hold every route of Server.routes, keyed "METHOD
// pattern". A route added to the table without an entry here fails
// TestAuthzMatrix, so that nobody ships a route whose access was never
// stated. The success of a state-changing page is a real change (303 to
// the changed thing) wherever one can be made again for the next caller;
// sign-in and the password change answer 400 to an empty form, which
// reaches the handler and changes nothing.
var authzRoutes = map[string]authzRoute{
	"GET /static/*":                                 {min: anyone, path: "/static/charts.js", ok: 200},
	"GET /signin":                                   {min: anyone, path: "/signin", ok: 200, signed: 303},
	"POST /signin":                                  {min: anyone, path: "/signin", body: "name=&password=", form: true, ok: 400},
	"GET /healthz":                                  {min: anyone, path: "/healthz", ok: 200},
	"GET /review/review.css":                        {min: anyone, path: "/review/review.css", ok: 200},
	"POST /signout":                                 {min: store.RoleViewer, path: "/signout", form: true, ok: 303},
	"GET /password":                                 {min: store.RoleViewer, path: "/password", ok: 200},
	"POST /password":                                {min: store.RoleViewer, path: "/password", body: "current=&new=&confirm=", form: true, ok: 400},
	"GET /":                                         {min: store.RoleViewer, path: "/", ok: 200},
	"GET /processes/{id}":                           {min: store.RoleViewer, path: "/processes/{id}", ok: 200},
	"GET /processes/{id}/chart.csv":                 {min: store.RoleViewer, path: "/processes/{id}/chart.csv?period=all", ok: 200},
	"GET /lots/{lot}":                               {min: store.RoleViewer, path: "/lots/{lot}", ok: 200},
	"GET /review":                                   {min: store.RoleViewer, path: "/review", ok: 200},
	"GET /review/download":                          {min: store.RoleViewer, path: "/review/download?format=csv", ok: 200},
	"GET /plan":                                     {min: store.RoleViewer, path: "/plan?process={id}&n=200", ok: 200},
	"GET /log":                                      {min: store.RoleInspector, path: "/log", ok: 200},
	"GET /processes/{id}/log":                       {min: store.RoleInspector, path: "/processes/{id}/log", ok: 200},
	"POST /processes/{id}/lots":                     {min: store.RoleInspector, form: true, writes: true, ok: 303, setup: fxFormLot},
	"POST /lots/{lot}/causes":                       {min: store.RoleInspector, path: "/lots/{lot}/causes", body: "cause=worn+die&action=die+replaced&rule=", form: true, writes: true, ok: 303},
	"POST /lots/{lot}/causes/{ann}/close":           {min: store.RoleInspector, form: true, writes: true, ok: 303, setup: fxOpenCause},
	"POST /lots/{lot}/correct":                      {min: store.RoleInspector, form: true, writes: true, ok: 303, setup: fxLotToCorrect},
	"POST /lots/{lot}/void":                         {min: store.RoleInspector, form: true, writes: true, ok: 303, setup: fxLotToVoid},
	"GET /upload":                                   {min: store.RoleInspector, path: "/upload", ok: 200},
	"POST /upload":                                  {min: store.RoleInspector, ok: 200, setup: fxUpload},
	"POST /upload/{key}":                            {min: store.RoleInspector, form: true, writes: true, ok: 200, setup: fxWaitingUpload},
	"POST /upload/{key}/ignore":                     {min: store.RoleInspector, form: true, ok: 200, setup: fxUnknownColumn("ignore", store.RoleInspector)},
	"POST /upload/{key}/map":                        {min: store.RoleEngineer, form: true, writes: true, ok: 200, setup: fxUnknownColumn("map", store.RoleEngineer)},
	"GET /processes/{id}/limits":                    {min: store.RoleEngineer, path: "/processes/{id}/limits", ok: 200},
	"POST /processes/{id}/limits":                   {min: store.RoleEngineer, path: "/processes/{id}/limits", body: "reason=baseline+of+the+first+lots", form: true, writes: true, ok: 303},
	"GET /settings/processes":                       {min: store.RoleEngineer, path: "/settings/processes", ok: 200},
	"POST /settings/processes":                      {min: store.RoleEngineer, form: true, writes: true, ok: 303, setup: fxNewProcess},
	"POST /settings/plant":                          {min: store.RoleEngineer, path: "/settings/plant", body: "tz=Europe%2FBerlin&reason=the+plant+is+in+Berlin", form: true, writes: true, ok: 303},
	"GET /processes/{id}/settings":                  {min: store.RoleEngineer, path: "/processes/{id}/settings", ok: 200},
	"POST /processes/{id}/settings":                 {min: store.RoleEngineer, form: true, writes: true, ok: 303, setup: fxProcessToEdit},
	"GET /admin/users":                              {min: store.RoleAdmin, path: "/admin/users", ok: 200},
	"POST /admin/users":                             {min: store.RoleAdmin, form: true, writes: true, ok: 303, setup: fxNewUser},
	"POST /admin/users/{name}/password":             {min: store.RoleAdmin, form: true, writes: true, ok: 303, setup: fxUserToReset},
	"POST /admin/users/{name}/active":               {min: store.RoleAdmin, form: true, writes: true, ok: 303, setup: fxUserToDeactivate},
	"POST /admin/tokens":                            {min: store.RoleAdmin, path: "/admin/tokens", body: "user=viewer1&label=line+terminal", form: true, writes: true, ok: 200},
	"POST /admin/tokens/{tok}/revoke":               {min: store.RoleAdmin, form: true, writes: true, ok: 303, setup: fxTokenToRevoke},
	"GET /api/v1/openapi.json":                      {min: anyone, path: "/api/v1/openapi.json", ok: 200},
	"GET /api/v1/me":                                {min: store.RoleViewer, path: "/api/v1/me", ok: 200},
	"GET /api/v1/processes":                         {min: store.RoleViewer, path: "/api/v1/processes", ok: 200},
	"GET /api/v1/processes/{id}":                    {min: store.RoleViewer, path: "/api/v1/processes/{id}", ok: 200},
	"GET /api/v1/processes/{id}/chart":              {min: store.RoleViewer, path: "/api/v1/processes/{id}/chart", ok: 200},
	"GET /api/v1/processes/{id}/lots":               {min: store.RoleViewer, path: "/api/v1/processes/{id}/lots", ok: 200},
	"POST /api/v1/processes/{id}/lots":              {min: store.RoleInspector, path: "/api/v1/processes/{id}/lots", body: "lot", writes: true, ok: 201},
	"GET /api/v1/processes/{id}/signals":            {min: store.RoleViewer, path: "/api/v1/processes/{id}/signals", ok: 200},
	"GET /api/v1/processes/{id}/limits":             {min: store.RoleViewer, path: "/api/v1/processes/{id}/limits", ok: 200},
	"GET /api/v1/users":                             {min: store.RoleAdmin, path: "/api/v1/users", ok: 200},
	"GET /attention":                                {min: store.RoleViewer, path: "/attention", ok: 200},
	"POST /attention/causes":                        {min: store.RoleInspector, form: true, writes: true, ok: 303, setup: fxBulkCause},
	"GET /api/v1/attention":                         {min: store.RoleViewer, path: "/api/v1/attention", ok: 200},
	"POST /api/v1/processes/{id}/lots/{lot}/causes": {min: store.RoleInspector, writes: true, ok: 201, setup: fxAPICause},
	"GET /alerts":                                   {min: store.RoleEngineer, path: "/alerts", ok: 200},
	"POST /alerts":                                  {min: store.RoleEngineer, form: true, writes: true, ok: 303, setup: fxNewAlertRule},
	"POST /alerts/{rule}/remove":                    {min: store.RoleEngineer, form: true, writes: true, ok: 303, setup: fxAlertRuleToRemove},
	"POST /alerts/{rule}/test":                      {min: store.RoleEngineer, form: true, ok: 303, setup: fxAlertRuleToTest},
}

// The fixtures of the state-changing routes. Each call makes what one
// request changes (so that every caller allowed to use a route really
// changes something, and the next caller finds a fresh target).

// fxFormLot is a new lot posted through the form.
func fxFormLot(m *matrixEnv, t *testing.T, who caller) sent {
	m.seq++
	return sent{path: m.path("/processes/{id}/lots"), body: fmt.Sprintf("lot=FZ%05d&inspected=200&count=3&cat0=1&shift=early", m.seq)}
}

// fxOpenCause is an open annotation on the fixture lot, to be closed.
func fxOpenCause(m *matrixEnv, t *testing.T, who caller) sent {
	a, err := m.db.AddAnnotation(context.Background(), "setup", store.Annotation{ProcessID: m.proc.ID, LotID: m.lot.ID, Cause: "loose fixture"})
	if err != nil {
		t.Fatal(err)
	}
	return sent{path: fmt.Sprintf("/lots/%d/causes/%d/close", m.lot.ID, a.ID), body: "action=fixture+tightened"}
}

// fxAPICause is a cause posted through the API for the fixture lot, named
// by its code (a lot takes any number of causes).
func fxAPICause(m *matrixEnv, t *testing.T, who caller) sent {
	return sent{path: m.path("/api/v1/processes/{id}/lots/" + url.PathEscape(m.lot.Lot) + "/causes"), body: `{"cause": "worn die", "action": "die replaced"}`}
}

// fxBulkCause is one cause for the fixture lot ticked on the worklist.
func fxBulkCause(m *matrixEnv, t *testing.T, who caller) sent {
	return sent{path: "/attention/causes", body: fmt.Sprintf("lot=%d&cause=worn+die&back=%%2Fattention", m.lot.ID)}
}

// freshLot stores a new lot half an hour before the clock.
func (m *matrixEnv) freshLot(t *testing.T) store.Lot {
	m.seq++
	ls, err := m.db.AddLots(context.Background(), "setup", m.proc.ID, []store.LotInput{{Lot: fmt.Sprintf("FX%05d", m.seq),
		Time: m.clock.Now().Add(-30 * time.Minute), Inspected: 200, Count: 4}})
	if err != nil {
		t.Fatal(err)
	}
	return ls[0]
}

// fxLotToCorrect is a stored lot and a correction of its count.
func fxLotToCorrect(m *matrixEnv, t *testing.T, who caller) sent {
	l := m.freshLot(t)
	return sent{path: fmt.Sprintf("/lots/%d/correct", l.ID), body: "lot=" + l.Lot + "&inspected=200&count=5&reason=miscounted"}
}

// fxLotToVoid is a stored lot and a reason to void it.
func fxLotToVoid(m *matrixEnv, t *testing.T, who caller) sent {
	l := m.freshLot(t)
	return sent{path: fmt.Sprintf("/lots/%d/void", l.ID), body: "reason=entered+on+the+wrong+process"}
}

// uploadBody is a multipart upload of a one-lot file.
func (m *matrixEnv) uploadBody(t *testing.T) (string, string) {
	m.seq++
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	mw.WriteField("process", fmt.Sprint(m.proc.ID))
	fw, err := mw.CreateFormFile("file", "lots.csv")
	if err != nil {
		t.Fatal(err)
	}
	fmt.Fprintf(fw, "lot,inspected,defective\nUP%05d,150,2\n", m.seq)
	mw.Close()
	return b.String(), mw.FormDataContentType()
}

// fxUpload is a good lot file: the answer is its preview.
func fxUpload(m *matrixEnv, t *testing.T, who caller) sent {
	body, ctype := m.uploadBody(t)
	return sent{path: "/upload", body: body, ctype: ctype}
}

var uploadAction = regexp.MustCompile(`action="(/upload/[0-9a-f]+)"`)

// fxWaitingUpload is a previewed upload of who's own session, waiting for
// its confirmation (an upload is bound to the session that made it, so a
// caller without a session, or without the role to upload, gets a key
// that waits for nobody).
func fxWaitingUpload(m *matrixEnv, t *testing.T, who caller) sent {
	if who.via != "session" || !who.role.AtLeast(store.RoleInspector) {
		return sent{path: "/upload/00112233445566778899aabbccddeeff"}
	}
	body, ctype := m.uploadBody(t)
	rec := m.do(req{method: "POST", path: "/upload", body: body, cookie: m.cookie(t, who.role),
		headers: map[string]string{"Sec-Fetch-Site": "same-origin", "Content-Type": ctype}})
	k := uploadAction.FindStringSubmatch(rec.Body.String())
	if rec.Code != 200 || k == nil {
		t.Fatalf("upload as %s: status %d, no confirmation form\n%s", who.name, rec.Code, trim(rec.Body.String()))
	}
	return sent{path: k[1]}
}

var columnsAction = regexp.MustCompile(`action="/upload/([0-9a-f]+)/ignore"`)

// fxUnknownColumn is an upload of who's own session whose file has a
// column the process does not know, waiting for who to ignore it or map
// it onto the category dent (action "ignore" or "map").
func fxUnknownColumn(action string, min store.Role) func(m *matrixEnv, t *testing.T, who caller) sent {
	return func(m *matrixEnv, t *testing.T, who caller) sent {
		if who.via != "session" || !who.role.AtLeast(min) {
			return sent{path: "/upload/00112233445566778899aabbccddeeff/" + action}
		}
		m.seq++
		col := fmt.Sprintf("Grat%05d", m.seq)
		var b bytes.Buffer
		mw := multipart.NewWriter(&b)
		mw.WriteField("process", fmt.Sprint(m.proc.ID))
		fw, _ := mw.CreateFormFile("file", "plant.csv")
		fmt.Fprintf(fw, "lot;inspected;defective;%s\nUP%05d;150;2;1\n", col, m.seq)
		mw.Close()
		rec := m.do(req{method: "POST", path: "/upload", body: b.String(), cookie: m.cookie(t, who.role),
			headers: map[string]string{"Sec-Fetch-Site": "same-origin", "Content-Type": mw.FormDataContentType()}})
		k := columnsAction.FindStringSubmatch(rec.Body.String())
		if rec.Code != 400 || k == nil {
			t.Fatalf("upload as %s: status %d, no form for the unknown column\n%s", who.name, rec.Code, trim(rec.Body.String()))
		}
		body := url.Values{"ignore": {col}}
		if action == "map" {
			body = url.Values{"header": {col}, "target": {"dent"}}
		}
		return sent{path: "/upload/" + k[1] + "/" + action, body: body.Encode()}
	}
}

func processBody(name, description, reason string) string {
	return url.Values{"name": {name}, "description": {description}, "chart": {"p"}, "method": {"sigma"}, "k": {"3"},
		"rules": {"we"}, "categories": {"burr, crack"}, "tz": {"UTC"}, "reason": {reason}}.Encode()
}

// fxNewProcess is the form of a new process.
func fxNewProcess(m *matrixEnv, t *testing.T, who caller) sent {
	m.seq++
	return sent{path: "/settings/processes", body: processBody(fmt.Sprintf("Press line %d", m.seq), "stamping", "")}
}

// fxProcessToEdit is a stored process and a new description for it.
func fxProcessToEdit(m *matrixEnv, t *testing.T, who caller) sent {
	m.seq++
	name := fmt.Sprintf("Weld cell %d", m.seq)
	p, err := m.db.AddProcess(context.Background(), "setup", store.Process{Name: name, Chart: spc.ChartP, Method: spc.MethodSigma,
		K: 3, Rules: "we", Categories: []string{"burr", "crack"}, TimeZone: "UTC", Active: true})
	if err != nil {
		t.Fatal(err)
	}
	return sent{path: fmt.Sprintf("/processes/%d/settings", p.ID), body: processBody(name, "spot welds, second shift", "describe the cell")}
}

// fxNewAlertRule is the form of a new webhook rule of the process.
func fxNewAlertRule(m *matrixEnv, t *testing.T, who caller) sent {
	m.seq++
	return sent{path: "/alerts", body: url.Values{"process": {fmt.Sprint(m.proc.ID)}, "target": {"webhook"},
		"webhook": {fmt.Sprintf("http://127.0.0.1:9/hook/%d", m.seq)}, "secret": {"s3cret"}, "on": {"out_of_limits"}}.Encode()}
}

// alertRule stores a webhook rule of the process.
func (m *matrixEnv) alertRule(t *testing.T) store.AlertRule {
	r, err := m.db.AddAlertRule(context.Background(), "setup", store.AlertRule{ProcessID: m.proc.ID, Webhook: "http://127.0.0.1:9/hook", Secret: "s3cret"})
	if err != nil {
		t.Fatal(err)
	}
	return r
}

// fxAlertRuleToRemove is a rule in force to remove.
func fxAlertRuleToRemove(m *matrixEnv, t *testing.T, who caller) sent {
	return sent{path: fmt.Sprintf("/alerts/%d/remove", m.alertRule(t).ID)}
}

// fxAlertRuleToTest is a rule to send a test message to.
func fxAlertRuleToTest(m *matrixEnv, t *testing.T, who caller) sent {
	return sent{path: fmt.Sprintf("/alerts/%d/test", m.alertRule(t).ID)}
}

// fxNewUser is the form of a new user.
func fxNewUser(m *matrixEnv, t *testing.T, who caller) sent {
	m.seq++
	return sent{path: "/admin/users", body: fmt.Sprintf("name=clerk%d&role=viewer&password=%s", m.seq, testPassword)}
}

// spareUser stores a user that no caller of the matrix signs in as.
func (m *matrixEnv) spareUser(t *testing.T) string {
	m.seq++
	name := fmt.Sprintf("spare%d", m.seq)
	if _, err := m.db.AddUser(context.Background(), "setup", name, store.RoleInspector, testPassword); err != nil {
		t.Fatal(err)
	}
	return name
}

// fxUserToReset is a user and a new password for them.
func fxUserToReset(m *matrixEnv, t *testing.T, who caller) sent {
	return sent{path: "/admin/users/" + m.spareUser(t) + "/password", body: "password=another-shift-8"}
}

// fxUserToDeactivate is an active user to deactivate.
func fxUserToDeactivate(m *matrixEnv, t *testing.T, who caller) sent {
	return sent{path: "/admin/users/" + m.spareUser(t) + "/active", body: "active=0&reason=left+the+plant"}
}

// fxTokenToRevoke is a live API token to revoke.
func fxTokenToRevoke(m *matrixEnv, t *testing.T, who caller) sent {
	_, tok, err := m.db.CreateToken(context.Background(), "setup", "viewer1", "to revoke")
	if err != nil {
		t.Fatal(err)
	}
	return sent{path: fmt.Sprintf("/admin/tokens/%d/revoke", tok.ID)}
}

// caller is who makes a request in the matrix.
type caller struct {
	name  string
	role  store.Role // "" for anonymous
	via   string     // "session", "token" or "" (anonymous)
	token string
}

// matrixEnv is a test server with the route table's expectations checked
// and a way to send the matrix's requests.
type matrixEnv struct {
	*testEnv
	seq     int
	cookies map[store.Role]*http.Cookie
	lot     store.Lot // a stored lot of the process
}

// path fills in the process and the fixture lot.
func (m *matrixEnv) path(p string) string {
	return strings.NewReplacer("{id}", fmt.Sprint(m.proc.ID), "{lot}", fmt.Sprint(m.lot.ID)).Replace(p)
}

// prepare makes the request of rt for who: its fixtures, path and body.
func (m *matrixEnv) prepare(t *testing.T, rt authzRoute, method string, who caller) sent {
	if rt.setup != nil {
		return rt.setup(m, t, who)
	}
	s := sent{path: m.path(rt.path)}
	if method != "GET" && method != "HEAD" {
		s.body = m.body(rt)
	}
	return s
}

func (m *matrixEnv) body(rt authzRoute) string {
	if rt.body == "lot" {
		m.seq++
		return fmt.Sprintf(`{"lot":"AZ%05d","inspected":100,"defective":1}`, m.seq)
	}
	return rt.body
}

// cookie returns a live session of the role, signing in again when a
// route of the matrix (sign-out) ended it.
func (m *matrixEnv) cookie(t *testing.T, role store.Role) *http.Cookie {
	c := m.cookies[role]
	if c != nil {
		if rec := m.do(req{method: "GET", path: "/api/v1/me", cookie: c}); rec.Code == 200 {
			return c
		}
	}
	c = m.signIn(t, string(role)+"1", testPassword)
	m.cookies[role] = c
	return c
}

// send makes the prepared request s of rt as who, with extra headers.
func (m *matrixEnv) send(t *testing.T, method string, rt authzRoute, s sent, who caller, headers map[string]string) (int, string, string) {
	r := req{method: method, path: s.path, body: s.body, form: rt.form, headers: map[string]string{"Sec-Fetch-Site": "same-origin"}}
	if s.ctype != "" {
		r.headers["Content-Type"] = s.ctype
	}
	for k, v := range headers {
		r.headers[k] = v
	}
	switch who.via {
	case "session":
		r.cookie = m.cookie(t, who.role)
	case "token":
		r.token = who.token
	}
	rec := m.do(r)
	return rec.Code, rec.Header().Get("Location"), rec.Body.String()
}

// expected is the status the role model gives who on rt: the route's
// success status for a caller with at least its role; otherwise 401 for
// the API (a token or sign-in is needed), a redirect to the sign-in page
// for a page, 403 for a signed-in caller below the role. A token
// authenticates the API only: on a page its bearer is anonymous.
func expected(pattern string, rt authzRoute, who caller) int {
	api := strings.HasPrefix(pattern, "/api/")
	anonymous := who.via == "" || (who.via == "token" && !api)
	switch {
	case rt.min == anyone:
		if !anonymous && rt.signed != 0 {
			return rt.signed
		}
		return rt.ok
	case anonymous && api:
		return http.StatusUnauthorized
	case anonymous:
		return http.StatusSeeOther
	case who.role.AtLeast(rt.min):
		return rt.ok
	}
	return http.StatusForbidden
}

func newMatrixEnv(t *testing.T) (*matrixEnv, []caller) {
	return newMatrixEnvOn(t, storetest.DB(t))
}

func newMatrixEnvOn(t *testing.T, path string) (*matrixEnv, []caller) {
	e := newTestEnvOn(t, path)
	lots := e.addLots(t, 30, func(i int) int64 { return int64(3 + i%4) })
	m := &matrixEnv{testEnv: e, cookies: map[store.Role]*http.Cookie{}, lot: lots[4]}
	callers := []caller{{name: "anonymous"}}
	for _, r := range roles {
		callers = append(callers, caller{name: string(r) + " (session)", role: r, via: "session"},
			caller{name: string(r) + " (token)", role: r, via: "token", token: e.tokens[r]})
	}
	return m, callers
}

// TestAuthzMatrix sends every route of the server's table, as every
// caller (anonymous, and each role by session and by API token), and
// checks the status against the role model; GET routes are also sent as
// HEAD (answered like GET). Refusals of the API are JSON with an error;
// anonymous page requests are sent to the sign-in page.
func TestAuthzMatrix(t *testing.T) {
	for _, b := range storetest.Backends {
		t.Run(b.Name, func(t *testing.T) {
			m, callers := newMatrixEnvOn(t, b.DB(t))
			table := m.srv.routes()
			seen := map[string]bool{}
			for _, rt := range table {
				key := rt.method + " " + rt.pattern
				seen[key] = true
				if _, ok := authzRoutes[key]; !ok {
					t.Errorf("route %s has no expectation in authzRoutes: state who may use it", key)
				}
			}
			for key := range authzRoutes {
				if !seen[key] {
					t.Errorf("authzRoutes expects %s, which is not in the route table", key)
				}
			}
			checked := 0
			for _, rt := range table {
				key := rt.method + " " + rt.pattern
				exp, ok := authzRoutes[key]
				if !ok {
					continue
				}
				methods := []string{rt.method}
				if rt.method == "GET" {
					methods = append(methods, "HEAD")
				}
				for _, method := range methods {
					for _, who := range callers {
						want := expected(rt.pattern, exp, who)
						s := m.prepare(t, exp, method, who)
						var auditBefore string
						if method == "POST" {
							auditBefore = m.auditOf(t)
						}
						got, loc, body := m.send(t, method, exp, s, who, nil)
						checked++
						if got != want {
							t.Errorf("%s %s as %s: status %d, want %d\n%s", method, rt.pattern, who.name, got, want, trim(body))
							continue
						}
						if method == "POST" {
							changed := m.auditOf(t) != auditBefore
							if allowed := got == exp.ok && (exp.min == anyone || who.via == "session" || strings.HasPrefix(rt.pattern, "/api/")); allowed && changed != exp.writes {
								t.Errorf("%s %s as %s: audit trail changed %v, want %v", method, rt.pattern, who.name, changed, exp.writes)
							} else if !allowed && changed {
								t.Errorf("%s %s as %s: a refused request changed the audit trail", method, rt.pattern, who.name)
							}
						}
						if got == http.StatusSeeOther && exp.min != anyone && who.via != "session" && !strings.HasPrefix(loc, "/signin?next=") {
							t.Errorf("%s %s as %s: redirected to %q, want the sign-in page", method, rt.pattern, who.name, loc)
						}
						if (got == 401 || got == 403) && strings.HasPrefix(rt.pattern, "/api/") && method != "HEAD" && !strings.Contains(body, `"error"`) {
							t.Errorf("%s %s as %s: refusal is not a JSON error: %s", method, rt.pattern, who.name, trim(body))
						}
					}
				}
			}
			t.Logf("%d routes × %d callers: %d requests checked", len(table), len(callers), checked)
		})
	}
}

// TestAuthzCrossOrigin: every state-changing route of the table refuses
// a request that a browser marks as coming from another site — by Origin
// or by Sec-Fetch-Site (Fetch Metadata, W3C) — whatever credentials it
// carries, and the refused request changes nothing.
func TestAuthzCrossOrigin(t *testing.T) {
	m, _ := newMatrixEnv(t)
	foreign := []map[string]string{
		{"Origin": "http://evil.example", "Sec-Fetch-Site": ""},
		{"Sec-Fetch-Site": "cross-site"},
		{"Origin": "http://evil.example", "Sec-Fetch-Site": "cross-site"},
		{"Origin": "null", "Sec-Fetch-Site": ""},
	}
	n := 0
	for _, rt := range m.srv.routes() {
		if rt.method == "GET" || rt.method == "HEAD" {
			continue
		}
		exp, ok := authzRoutes[rt.method+" "+rt.pattern]
		if !ok {
			t.Errorf("route %s %s has no expectation in authzRoutes", rt.method, rt.pattern)
			continue
		}
		for _, h := range foreign {
			for _, who := range []caller{{name: "anonymous"}, {name: "admin (session)", role: store.RoleAdmin, via: "session"},
				{name: "admin (token)", role: store.RoleAdmin, via: "token", token: m.tokens[store.RoleAdmin]}} {
				s := m.prepare(t, exp, rt.method, who) // fixtures first: the refusal must change nothing after them
				before := m.exportOf(t)
				auditBefore := m.auditOf(t)
				hdr := map[string]string{}
				for k, v := range h {
					hdr[k] = v
				}
				got, _, body := m.send(t, rt.method, exp, s, who, hdr)
				n++
				if got != http.StatusForbidden {
					t.Errorf("%s %s as %s with %v: status %d, want 403\n%s", rt.method, rt.pattern, who.name, h, got, trim(body))
				}
				if m.exportOf(t) != before || m.auditOf(t) != auditBefore {
					t.Errorf("%s %s as %s with %v changed the store", rt.method, rt.pattern, who.name, h)
				}
			}
		}
	}
	// The admin's session survived every refused sign-out.
	if c := m.cookies[store.RoleAdmin]; c == nil || m.do(req{method: "GET", path: "/", cookie: c}).Code != 200 {
		t.Error("a refused cross-origin request ended the session")
	}
	t.Logf("%d cross-origin requests refused", n)
}

// TestAuthzSessions: a session id that exists before sign-in is never the
// one after it (session fixation, OWASP Session Management Cheat Sheet);
// an expired session is anonymous on every route; a revoked token and the
// token of a disabled user are refused on every API route.
func TestAuthzSessions(t *testing.T) {
	m, _ := newMatrixEnv(t)
	// Fixation: a planted id (valid for another user, or unknown).
	planted := m.signIn(t, "viewer1", testPassword)
	for _, c := range []*http.Cookie{planted, {Name: m.srv.cookieName(), Value: "attacker-chosen-session-id-0123456789abcdef"}} {
		rec := m.do(req{method: "POST", path: "/signin", form: true, cookie: c, headers: sameOrigin(), body: "name=admin1&password=" + testPassword})
		if rec.Code != http.StatusSeeOther {
			t.Fatalf("sign-in: %d", rec.Code)
		}
		var after *http.Cookie
		for _, k := range rec.Result().Cookies() {
			if k.Name == m.srv.cookieName() && k.Value != "" {
				after = k
			}
		}
		if after == nil || after.Value == c.Value {
			t.Fatalf("the session id after sign-in is the one planted before it (%q)", c.Value)
		}
		if m.do(req{method: "GET", path: "/api/v1/me", cookie: c}).Code != http.StatusUnauthorized {
			t.Errorf("the planted id %q still authenticates after the sign-in", c.Value)
		}
		if me := decodeJSON[map[string]any](t, m.do(req{method: "GET", path: "/api/v1/me", cookie: after})); me["name"] != "admin1" {
			t.Errorf("the new session is %v, want admin1", me)
		}
	}

	// Expiry: 31 idle minutes (SessionIdle is 30) make every route treat
	// the cookie as anonymous.
	cookies := map[store.Role]*http.Cookie{}
	for _, r := range roles {
		cookies[r] = m.signIn(t, string(r)+"1", testPassword)
	}
	m.clock.Advance(SessionIdle + time.Minute)
	anon := caller{name: "anonymous"}
	for _, rt := range m.srv.routes() {
		exp, ok := authzRoutes[rt.method+" "+rt.pattern]
		if !ok || exp.min == anyone {
			continue
		}
		for _, r := range roles {
			s := m.prepare(t, exp, rt.method, anon)
			rq := req{method: rt.method, path: s.path, body: s.body, form: exp.form, cookie: cookies[r], headers: sameOrigin()}
			if s.ctype != "" {
				rq.headers["Content-Type"] = s.ctype
			}
			if got, want := m.do(rq).Code, expected(rt.pattern, exp, anon); got != want {
				t.Errorf("%s %s with the expired session of %s: status %d, want %d", rt.method, rt.pattern, r, got, want)
			}
		}
	}

	// Revoked tokens and disabled users.
	ctx := context.Background()
	for _, r := range roles {
		raw, tok, err := m.db.CreateToken(ctx, "setup", string(r)+"1", "to revoke")
		if err != nil {
			t.Fatal(err)
		}
		if got := m.do(req{method: "GET", path: "/api/v1/me", token: raw}).Code; got != 200 {
			t.Fatalf("fresh token of %s: %d", r, got)
		}
		if err := m.db.RevokeToken(ctx, "setup", tok.ID); err != nil {
			t.Fatal(err)
		}
		m.checkTokenRefused(t, raw, "revoked token of "+string(r))
	}
	if err := m.db.SetUserActive(ctx, "setup", "inspector1", false, "left the plant"); err != nil {
		t.Fatal(err)
	}
	m.checkTokenRefused(t, m.tokens[store.RoleInspector], "token of a disabled user")
	for _, bad := range []string{"Bearer lw_not-a-token", "Bearer ", "Basic YWRtaW4xOnF1YWxpdHktZmlyc3QtNw==", "lw_no-scheme"} {
		rec := m.do(req{method: "GET", path: "/api/v1/me", headers: map[string]string{"Authorization": bad}})
		if rec.Code != http.StatusUnauthorized {
			t.Errorf("Authorization %q: status %d, want 401", bad, rec.Code)
		}
	}
}

// checkTokenRefused: every API route answers 401 with a Bearer challenge
// to the token, and a refused post stores nothing.
func (m *matrixEnv) checkTokenRefused(t *testing.T, raw, what string) {
	t.Helper()
	before := m.lotCount(t)
	for _, rt := range m.srv.routes() {
		exp, ok := authzRoutes[rt.method+" "+rt.pattern]
		if !ok || !strings.HasPrefix(rt.pattern, "/api/") {
			continue
		}
		s := m.prepare(t, exp, rt.method, caller{name: what, via: "token", token: raw})
		rq := req{method: rt.method, path: s.path, body: s.body, token: raw}
		rec := m.do(rq)
		if rec.Code != http.StatusUnauthorized || !strings.HasPrefix(rec.Header().Get("WWW-Authenticate"), "Bearer") {
			t.Errorf("%s %s with the %s: status %d (WWW-Authenticate %q), want 401 with a Bearer challenge", rt.method, rt.pattern, what, rec.Code, rec.Header().Get("WWW-Authenticate"))
		}
	}
	if m.lotCount(t) != before {
		t.Errorf("the %s stored lots", what)
	}
}
