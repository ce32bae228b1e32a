package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"regexp"
	"strings"
	"sync"
	"time"
	"unicode"
	"unicode/utf8"

	"lotwatch/spc"
	"lotwatch/store/lotcsv"
)

// Process is one inspection point whose lots make one control chart.
type Process struct {
	ID          int64
	Name        string
	Description string
	Chart       spc.Chart
	Method      spc.Method
	K           float64
	// Rules is the run-rule set: "we", "nelson", "none" or a list like
	// "we1,nelson3".
	Rules      string
	Categories []string // defect categories, in display order
	TimeZone   string   // IANA, e.g. "Europe/Berlin"
	// Area is the plant's area or line the process belongs to ("Press
	// shop", "Line 4"): a label for finding a process among many; "" when
	// none.
	Area string
	// Monitors are the CUSUM and EWMA watched beside the chart for small
	// sustained shifts (spc.Monitors; its CUSUMH is never stored here, a
	// frozen limit set holds the decision interval in force).
	Monitors spc.Monitors
	Active   bool // false once retired
	Created  time.Time
	// ColumnMap maps the plant's own lot-file headers (any letter case) to
	// lotwatch's columns or the process's categories, e.g.
	// "Qty inspected" → "inspected". Empty when none.
	ColumnMap map[string]string
	// DateOrder is how the plant writes local dates: "" (only
	// YYYY-MM-DD), lotcsv.DateDayFirst or lotcsv.DateMonthFirst.
	DateOrder string
}

var locCache sync.Map // zone name → *time.Location

func loadLocation(name string) (*time.Location, error) {
	if l, ok := locCache.Load(name); ok {
		return l.(*time.Location), nil
	}
	l, err := time.LoadLocation(name)
	if err != nil {
		return nil, err
	}
	locCache.Store(name, l)
	return l, nil
}

// Location is the plant's time zone of the process (UTC if unknown).
func (p Process) Location() *time.Location {
	if l, err := loadLocation(p.TimeZone); err == nil && p.TimeZone != "" {
		return l
	}
	return time.UTC
}

// ReadOptions are the options for reading a lot file of the process:
// its chart, categories and time zone.
func (p Process) ReadOptions() lotcsv.Options {
	return lotcsv.Options{Chart: p.Chart, Categories: p.Categories, Location: p.Location(), Columns: p.ColumnMap, DateOrder: p.DateOrder}
}

// MapTargets are the names a column map may point a header to: the lot
// columns and the process's categories.
func (p Process) MapTargets() []string {
	t := []string{lotcsv.ColLot, lotcsv.ColTime, lotcsv.ColShift, lotcsv.ColInspected, CountField(p.Chart), lotcsv.ColInspector, lotcsv.ColNote}
	return append(t, p.Categories...)
}

// checkColumnMap checks the column map of p and spells each target as
// MapTargets does: a header is a plain name, not one of lotwatch's own
// columns nor a category (those are read as they are), given once; a
// target is a lot column or a category of the process.
func checkColumnMap(p *Process) []Problem {
	var ps []Problem
	targets := map[string]string{}
	for _, t := range p.MapTargets() {
		targets[strings.ToLower(t)] = t
	}
	cats := map[string]bool{}
	for _, c := range p.Categories {
		cats[strings.ToLower(c)] = true
	}
	seen := map[string]bool{}
	out := make(map[string]string, len(p.ColumnMap))
	for from, to := range p.ColumnMap {
		key := strings.ToLower(from)
		t, ok := targets[strings.ToLower(strings.TrimSpace(to))]
		switch {
		case from == "" || strings.TrimSpace(from) != from || strings.IndexFunc(from, unicode.IsControl) >= 0 || !utf8.ValidString(from) || len(from) > 100:
			ps = append(ps, Problem{Field: "map", Value: strings.ToValidUTF8(from, "\uFFFD"), Reason: "is not a header name (1 to 100 bytes, no control characters, no spaces at either end)"})
		case reservedColumns[key] || cats[key]:
			ps = append(ps, Problem{Field: "map", Value: from, Reason: "is already a column lotwatch reads; it cannot be mapped"})
		case seen[key]:
			ps = append(ps, Problem{Field: "map", Value: from, Reason: "is given twice"})
		case !ok:
			ps = append(ps, Problem{Field: "map", Value: from + "=" + to, Reason: fmt.Sprintf("maps to %q, which is not one of %s", to, strings.Join(p.MapTargets(), ", "))})
		}
		seen[key] = true
		out[from] = t
	}
	if len(ps) == 0 {
		p.ColumnMap = out
	}
	return ps
}

var ruleItem = regexp.MustCompile(`^(we[1-4]|nelson[1-8])$`)

// CheckRules reports whether s is a rule set: "we" (Western Electric),
// "nelson" (Nelson), "none", or a comma list of single rules such as
// "we1,nelson3".
func CheckRules(s string) error {
	switch s {
	case "we", "nelson", "none":
		return nil
	}
	if s == "" {
		return errors.New("is empty (want we, nelson, none or a list like we1,nelson3)")
	}
	for _, it := range strings.Split(s, ",") {
		if !ruleItem.MatchString(it) {
			return fmt.Errorf("has %q, which is not a rule (want we, nelson, none or a list like we1,nelson3)", it)
		}
	}
	return nil
}

var reservedColumns = map[string]bool{lotcsv.ColLot: true, lotcsv.ColTime: true, lotcsv.ColShift: true,
	lotcsv.ColInspected: true, lotcsv.ColDefective: true, lotcsv.ColDefects: true, lotcsv.ColInspector: true, lotcsv.ColNote: true}

// normalize fills defaults and checks a process.
func normalizeProcess(p *Process) []Problem {
	var ps []Problem
	if p.Name == "" {
		ps = append(ps, Problem{Field: "name", Reason: "is empty"})
	}
	ps = append(ps, checkText("name", p.Name, 100, true)...)
	ps = append(ps, checkText("description", p.Description, 4000, false)...)
	ps = append(ps, checkText("area", p.Area, 100, true)...)
	ps = append(ps, checkMonitors(p.Chart, &p.Monitors)...)
	if m := p.Monitors; m.EWMAWidth != 0 && m.EWMAARL0 != 0 {
		ps = append(ps, Problem{Field: "ewma_arl0", Value: fmt.Sprint(m.EWMAARL0),
			Reason: fmt.Sprintf("is given with the width %g: give the width, or the lots between false alarms to design it for, not both", m.EWMAWidth)})
	}
	if _, err := spc.ParseChart(string(p.Chart)); err != nil {
		ps = append(ps, Problem{Field: "chart", Value: string(p.Chart), Reason: "is not p, np, u or c"})
	}
	if p.Method == "" {
		p.Method = spc.MethodSigma
	}
	if _, err := spc.ParseMethod(string(p.Method)); err != nil {
		ps = append(ps, Problem{Field: "limits", Value: string(p.Method), Reason: "is not sigma, exact or laney"})
	}
	if p.K == 0 {
		p.K = 3 // Shewhart's three-sigma limits
	}
	if math.IsNaN(p.K) || p.K <= 0 || p.K > 10 {
		ps = append(ps, Problem{Field: "sigma", Value: fmt.Sprint(p.K), Reason: "must be greater than 0 and at most 10"})
	}
	if p.Rules == "" {
		p.Rules = "we"
	}
	if err := CheckRules(p.Rules); err != nil {
		ps = append(ps, Problem{Field: "rules", Value: p.Rules, Reason: err.Error()})
	}
	if p.TimeZone == "" {
		p.TimeZone = "UTC"
	}
	if _, err := loadLocation(p.TimeZone); err != nil || p.TimeZone == "Local" {
		ps = append(ps, Problem{Field: "tz", Value: p.TimeZone, Reason: "is not an IANA time zone name (e.g. Europe/Berlin, America/Chicago, UTC)"})
	}
	seen := map[string]bool{}
	for _, c := range p.Categories {
		key := strings.ToLower(c)
		switch {
		case c == "":
			ps = append(ps, Problem{Field: "categories", Reason: "has an empty category name"})
		case strings.ContainsAny(c, ",\"") || strings.TrimSpace(c) != c || strings.IndexFunc(c, unicode.IsControl) >= 0 || !utf8.ValidString(c):
			ps = append(ps, Problem{Field: "categories", Value: c, Reason: "must not contain commas, quotes or control characters, nor start or end with spaces"})
		case strings.IndexFunc(c, isFormat) >= 0:
			ps = append(ps, formatProblem("categories", c))
		case lotcsv.Neutralise(c) != c:
			// The name heads a column of every export.
			ps = append(ps, Problem{Field: "categories", Value: c, Reason: "must not start with =, +, - or @ (a spreadsheet would run it as a formula)"})
		case reservedColumns[key]:
			ps = append(ps, Problem{Field: "categories", Value: c, Reason: "is the name of a standard lot column"})
		case seen[key]:
			ps = append(ps, Problem{Field: "categories", Value: c, Reason: "is given twice"})
		case len(c) > 64:
			ps = append(ps, Problem{Field: "categories", Value: c, Reason: "is longer than 64 bytes"})
		}
		seen[key] = true
	}
	if p.Categories == nil {
		p.Categories = []string{}
	}
	switch p.DateOrder {
	case "", lotcsv.DateDayFirst, lotcsv.DateMonthFirst:
	default:
		ps = append(ps, Problem{Field: "date-order", Value: p.DateOrder, Reason: "is not day-first or month-first (or empty: YYYY-MM-DD only)"})
	}
	ps = append(ps, checkColumnMap(p)...)
	return ps
}

type processAudit struct {
	Name        string    `json:"name"`
	Description string    `json:"description"`
	Chart       spc.Chart `json:"chart"`
	Method      string    `json:"method"`
	K           float64   `json:"k"`
	Rules       string    `json:"rules"`
	Categories  []string  `json:"categories"`
	TimeZone    string    `json:"time_zone"`
	Active      bool      `json:"active"`
	Area        string    `json:"area,omitempty"`
	// Left out when empty, so that entries written before these settings
	// existed still match their rows.
	ColumnMap  map[string]string `json:"column_map,omitempty"`
	DateOrder  string            `json:"date_order,omitempty"`
	CUSUMShift float64           `json:"cusum_shift,omitempty"`
	CUSUMARL0  float64           `json:"cusum_arl0,omitempty"`
	EWMALambda float64           `json:"ewma_lambda,omitempty"`
	EWMAWidth  float64           `json:"ewma_width,omitempty"`
	EWMAARL0   float64           `json:"ewma_arl0,omitempty"`
}

func auditProcess(p Process) processAudit {
	m := p.Monitors
	return processAudit{p.Name, p.Description, p.Chart, string(p.Method), p.K, p.Rules, p.Categories, p.TimeZone, p.Active, p.Area, p.ColumnMap, p.DateOrder,
		m.CUSUMShift, m.CUSUMARL0, m.EWMALambda, m.EWMAWidth, m.EWMAARL0}
}

// columnMapJSON is the stored form of a column map.
func columnMapJSON(m map[string]string) string {
	if len(m) == 0 {
		return "{}"
	}
	b, _ := json.Marshal(m)
	return string(b)
}

// checkMonitors checks the shift monitors of a process of chart ch.
func checkMonitors(ch spc.Chart, m *spc.Monitors) []Problem {
	var ps []Problem
	m.CUSUMH = 0
	bad := func(field string, v float64, why string) {
		ps = append(ps, Problem{Field: field, Value: fmt.Sprint(v), Reason: why})
	}
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	switch s := m.CUSUMShift; {
	case s == 0:
		if m.CUSUMARL0 != 0 {
			bad("cusum_arl0", m.CUSUMARL0, "is set without a shift for the CUSUM to catch")
		}
	case !finite(s) || s < 0 || ch.CountsUnits() && s >= 1:
		what := "a rate above 0"
		if ch.CountsUnits() {
			what = "a fraction strictly between 0 and 1"
		}
		bad("cusum_shift", s, "is not "+what)
	}
	if a := m.CUSUMARL0; a != 0 && (!finite(a) || a < 1) {
		bad("cusum_arl0", a, "is not a number of lots of 1 or more")
	}
	if l := m.EWMALambda; l != 0 && (!finite(l) || l < 0 || l > 1) {
		bad("ewma_lambda", l, "is not a weight above 0 and at most 1")
	}
	if w := m.EWMAWidth; w != 0 && (!finite(w) || w < 0) {
		bad("ewma_width", w, "is not a width above 0")
	}
	if m.EWMALambda == 0 && m.EWMAWidth != 0 {
		bad("ewma_width", m.EWMAWidth, "is set without an EWMA weight")
	}
	if a := m.EWMAARL0; a != 0 && (!finite(a) || a < 1) {
		bad("ewma_arl0", a, "is not a number of lots of 1 or more")
	} else if m.EWMALambda == 0 && a != 0 {
		bad("ewma_arl0", a, "is set without an EWMA weight")
	}
	return ps
}

// AddProcess creates an active process. Defaults: limits sigma, k 3,
// rules "we", time zone UTC.
func (db *DB) AddProcess(ctx context.Context, actor string, p Process) (Process, error) {
	err := db.write(ctx, func(w *wtx) error {
		var err error
		p, err = w.addActiveProcess(actor, p)
		return err
	})
	if err != nil {
		return Process{}, err
	}
	return p, nil
}

// addActiveProcess checks p, fills its defaults and adds it as active: for
// AddProcess and for an import that creates its process.
func (w *wtx) addActiveProcess(actor string, p Process) (Process, error) {
	if strings.TrimSpace(p.TimeZone) == "" {
		tz, err := plantTimeZoneIn(w.Tx)
		if err != nil {
			return Process{}, err
		}
		p.TimeZone = tz // the plant's zone, for a process given none
	}
	if ps := normalizeProcess(&p); len(ps) > 0 {
		return Process{}, invalid(ps...)
	}
	p.Active = true
	return w.addProcess(actor, p)
}

// errRetired refuses lots for the retired process p.
func errRetired(p Process) error {
	return invalid(Problem{Field: "process", Value: p.Name, Reason: "is retired: it takes no new lots"})
}

func (w *wtx) addProcess(actor string, p Process) (Process, error) {
	cats, _ := json.Marshal(p.Categories)
	p.Created = w.now.UTC()
	m := p.Monitors
	err := w.QueryRow(`INSERT INTO processes (name, description, chart, method, k, rules, categories, time_zone, active, created, area, column_map, date_order, cusum_shift, cusum_arl0, ewma_lambda, ewma_width, ewma_arl0)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) RETURNING id`, p.Name, p.Description, p.Chart, p.Method, p.K, p.Rules, string(cats), p.TimeZone, p.Active, w.now.UnixNano(), p.Area,
		columnMapJSON(p.ColumnMap), p.DateOrder, m.CUSUMShift, m.CUSUMARL0, m.EWMALambda, m.EWMAWidth, m.EWMAARL0).Scan(&p.ID)
	if isUnique(err) {
		return p, fmt.Errorf("process %q already exists: %w", p.Name, ErrConflict)
	}
	if err != nil {
		return p, err
	}
	return p, w.audit(actor, "add", "process", p.ID, p.ID, nil, auditProcess(p), "")
}

// judgesAlike reports whether two settings of a process judge its lots
// alike: the same limit method and width (for the trial limits), run
// rules and shift monitors. A change of any of them re-judges every lot,
// and the alert rules hear of what signals then.
func judgesAlike(a, b Process) bool {
	return a.Method == b.Method && a.K == b.K && a.Rules == b.Rules && a.Monitors == b.Monitors
}

// UpdateProcess changes a process (looked up by p.ID) and records why.
// The chart type cannot change once lots are logged, and categories can
// only be added (lots keep their counts by category name); retiring is
// Active = false.
func (db *DB) UpdateProcess(ctx context.Context, actor, reason string, p Process) (Process, error) {
	if ps := normalizeProcess(&p); len(ps) > 0 {
		return Process{}, invalid(ps...)
	}
	if ps := checkReason(reason, "say why the process changes"); len(ps) > 0 {
		return Process{}, invalid(ps...)
	}
	err := db.write(ctx, func(w *wtx) error {
		old, err := processByID(w.Tx, p.ID)
		if err != nil {
			return err
		}
		p.Created = old.Created
		if p.Chart != old.Chart {
			var n int
			if err := w.QueryRow("SELECT COUNT(*) FROM lots WHERE process_id = ?", p.ID).Scan(&n); err != nil {
				return err
			}
			if n > 0 {
				return invalid(Problem{Field: "chart", Value: string(p.Chart), Reason: fmt.Sprintf("cannot change from %s: the process has %d lots", old.Chart, n)})
			}
		}
		have := map[string]bool{}
		for _, c := range p.Categories {
			have[c] = true
		}
		for _, c := range old.Categories {
			if !have[c] {
				return invalid(Problem{Field: "categories", Value: c, Reason: "cannot be removed or renamed: lots keep their counts under it"})
			}
		}
		cats, _ := json.Marshal(p.Categories)
		m := p.Monitors
		_, err = w.Exec(`UPDATE processes SET name = ?, description = ?, chart = ?, method = ?, k = ?, rules = ?, categories = ?, time_zone = ?, active = ?, area = ?,
			column_map = ?, date_order = ?, cusum_shift = ?, cusum_arl0 = ?, ewma_lambda = ?, ewma_width = ?, ewma_arl0 = ? WHERE id = ?`,
			p.Name, p.Description, p.Chart, p.Method, p.K, p.Rules, string(cats), p.TimeZone, p.Active, p.Area, columnMapJSON(p.ColumnMap), p.DateOrder,
			m.CUSUMShift, m.CUSUMARL0, m.EWMALambda, m.EWMAWidth, m.EWMAARL0, p.ID)
		if isUnique(err) {
			return fmt.Errorf("process %q already exists: %w", p.Name, ErrConflict)
		}
		if err != nil {
			return err
		}
		delete(w.procs, p.ID)
		if err := w.bumpVersion(p.ID, true); err != nil {
			return err
		}
		if err := w.audit(actor, "update", "process", p.ID, p.ID, auditProcess(old), auditProcess(p), reason); err != nil {
			return err
		}
		if !judgesAlike(old, p) {
			return w.queueAlertBatch(AlertBatch{ProcessID: p.ID, Kind: BatchSettings,
				Cause: fmt.Sprintf("settings of process %s changed by %s: %s", p.Name, actor, reason)})
		}
		return nil
	})
	if err != nil {
		return Process{}, err
	}
	return p, nil
}

const processCols = "id, name, description, chart, method, k, rules, categories, time_zone, active, created, area, column_map, date_order, cusum_shift, cusum_arl0, ewma_lambda, ewma_width, ewma_arl0"

type queryer interface {
	QueryRow(query string, args ...any) *sql.Row
}

func scanProcess(s interface{ Scan(...any) error }) (Process, error) {
	var p Process
	var cats, cmap string
	var created int64
	if err := s.Scan(&p.ID, &p.Name, &p.Description, &p.Chart, &p.Method, &p.K, &p.Rules, &cats, &p.TimeZone, &p.Active, &created, &p.Area, &cmap, &p.DateOrder,
		&p.Monitors.CUSUMShift, &p.Monitors.CUSUMARL0, &p.Monitors.EWMALambda, &p.Monitors.EWMAWidth, &p.Monitors.EWMAARL0); err != nil {
		return Process{}, err
	}
	if err := json.Unmarshal([]byte(cats), &p.Categories); err != nil {
		return Process{}, fmt.Errorf("store: process %d: categories: %w", p.ID, err)
	}
	if err := json.Unmarshal([]byte(cmap), &p.ColumnMap); err != nil {
		return Process{}, fmt.Errorf("store: process %d: column map: %w", p.ID, err)
	}
	if len(p.ColumnMap) == 0 {
		p.ColumnMap = nil
	}
	p.Created = fromNanos(created, time.UTC)
	return p, nil
}

func processByID(q queryer, id int64) (Process, error) {
	p, err := scanProcess(q.QueryRow("SELECT "+processCols+" FROM processes WHERE id = ?", id))
	if errors.Is(err, sql.ErrNoRows) {
		return Process{}, fmt.Errorf("process %d: %w", id, ErrNotFound)
	}
	return p, err
}

// Processes lists processes by name; retired ones only when asked.
func (db *DB) Processes(ctx context.Context, includeRetired bool) ([]Process, error) {
	q := "SELECT " + processCols + " FROM processes"
	if !includeRetired {
		q += " WHERE active = 1"
	}
	rows, err := db.r.QueryContext(ctx, q+" ORDER BY name")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Process
	for rows.Next() {
		p, err := scanProcess(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, p)
	}
	return out, rows.Err()
}

// Process returns the process with the id, or ErrNotFound.
func (db *DB) Process(ctx context.Context, id int64) (Process, error) {
	p, err := scanProcess(db.r.QueryRowContext(ctx, "SELECT "+processCols+" FROM processes WHERE id = ?", id))
	if errors.Is(err, sql.ErrNoRows) {
		return Process{}, fmt.Errorf("process %d: %w", id, ErrNotFound)
	}
	return p, err
}

// ProcessByName returns the process with the name, or ErrNotFound.
func (db *DB) ProcessByName(ctx context.Context, name string) (Process, error) {
	p, err := scanProcess(db.r.QueryRowContext(ctx, "SELECT "+processCols+" FROM processes WHERE name = ?", name))
	if errors.Is(err, sql.ErrNoRows) {
		return Process{}, fmt.Errorf("process %q: %w", name, ErrNotFound)
	}
	return p, err
}
