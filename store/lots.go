package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"sort"
	"strconv"
	"time"
)

// LotInput is a lot as logged: by the form, the API or an imported file.
type LotInput struct {
	Lot        string
	Time       time.Time // zero → now
	Shift      string
	Inspected  int64
	Count      int64            // defective (p, np) or defects (u, c)
	Categories map[string]int64 // counts by defect category; a category left out was not recorded
	Inspector  string
	Note       string
}

// Lot is a stored lot in its current revision.
type Lot struct {
	ID        int64
	ProcessID int64
	LotInput
	Revision   int  // 1 for the lot as first logged
	Voided     bool // voided lots are left out of Lots and charts
	Recorded   time.Time
	RecordedBy string
	Reason     string // why this revision was made ("" for the first)
}

// encodeCategories is the stored form: a JSON object with sorted keys,
// "" for none. Plain names are written directly (this runs once per
// imported lot); others go through encoding/json.
func encodeCategories(m map[string]int64) string {
	if len(m) == 0 {
		return ""
	}
	var keys [16]string
	ks := keys[:0]
	for k := range m {
		if !plainKey(k) {
			b, _ := json.Marshal(m)
			return string(b)
		}
		ks = append(ks, k)
	}
	sort.Strings(ks)
	buf := make([]byte, 0, 16*len(ks)+2)
	buf = append(buf, '{')
	for i, k := range ks {
		if i > 0 {
			buf = append(buf, ',')
		}
		buf = append(buf, '"')
		buf = append(buf, k...)
		buf = append(buf, '"', ':')
		buf = strconv.AppendInt(buf, m[k], 10)
	}
	buf = append(buf, '}')
	return string(buf)
}

func plainKey(k string) bool {
	for i := 0; i < len(k); i++ {
		c := k[i]
		if c < 0x20 || c >= 0x7f || c == '"' || c == '\\' || c == '<' || c == '>' || c == '&' {
			return false
		}
	}
	return k != ""
}

func decodeCategories(s string) (map[string]int64, error) {
	if s == "" {
		return nil, nil
	}
	m := map[string]int64{}
	err := json.Unmarshal([]byte(s), &m)
	return m, err
}

// lotContent is the canonical content of a lot for the audit trail.
type lotContent struct {
	Lot        string           `json:"lot"`
	Time       string           `json:"time"`
	Shift      string           `json:"shift"`
	Inspected  int64            `json:"inspected"`
	Count      int64            `json:"count"`
	Categories map[string]int64 `json:"categories,omitempty"`
	Inspector  string           `json:"inspector"`
	Note       string           `json:"note"`
	Voided     bool             `json:"voided,omitempty"`
}

func contentOf(in LotInput, voided bool) lotContent {
	return lotContent{in.Lot, in.Time.UTC().Format(time.RFC3339Nano), in.Shift, in.Inspected, in.Count, in.Categories, in.Inspector, in.Note, voided}
}

// differs lists the fields in which the input differs from the stored lot.
// A zero input time, and (when cats is false) the categories, are not
// compared: the input does not state them.
func differs(stored Lot, in LotInput, f compareFields) []string {
	var d []string
	if stored.Voided {
		d = append(d, "voided")
	}
	if f.time && !in.Time.IsZero() && !stored.Time.Equal(in.Time) {
		d = append(d, "time")
	}
	if f.shift && stored.Shift != in.Shift {
		d = append(d, "shift")
	}
	if stored.Inspected != in.Inspected {
		d = append(d, "inspected")
	}
	if stored.Count != in.Count {
		d = append(d, "count")
	}
	for _, c := range f.categories {
		sv, sok := stored.Categories[c]
		iv, iok := in.Categories[c]
		if sok != iok || sv != iv {
			d = append(d, c)
		}
	}
	if f.inspector && stored.Inspector != in.Inspector {
		d = append(d, "inspector")
	}
	if f.note && stored.Note != in.Note {
		d = append(d, "note")
	}
	return d
}

// compareFields says which optional fields an input states.
type compareFields struct {
	time, shift, inspector, note bool
	categories                   []string
}

func allFields(p Process) compareFields {
	return compareFields{true, true, true, true, p.Categories}
}

const lotCols = "id, process_id, lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by, reason"

func scanLot(s interface{ Scan(...any) error }, l *Lot, loc *time.Location) error {
	var t, rec int64
	var cats string
	if err := s.Scan(&l.ID, &l.ProcessID, &l.Lot, &t, &l.Shift, &l.Inspected, &l.Count, &cats, &l.Inspector, &l.Note, &l.Revision, &l.Voided, &rec, &l.RecordedBy, &l.Reason); err != nil {
		return err
	}
	l.Time = fromNanos(t, loc)
	l.Recorded = fromNanos(rec, loc)
	var err error
	l.Categories, err = decodeCategories(cats)
	return err
}

// lotAdder inserts lots in the writer transaction; import and AddLots use it.
type lotAdder struct {
	w      *wtx
	p      Process
	actor  string
	ins    *sql.Stmt
	get    *sql.Stmt
	digest []byte
	h      hashWriter
	first  int64
	last   int64
	n      int
	buf    []byte
	listed []LotInput // the lots added, while there are at most maxListed
	// skipConflicts reports a stored lot with other values as a conflict
	// in the result rather than as a problem (import only).
	skipConflicts bool
}

// maxListed is the largest batch whose audit entry lists the lots' content
// (a larger one carries the digest only).
const maxListed = 20

type hashWriter interface {
	Write([]byte) (int, error)
	Sum([]byte) []byte
}

func (w *wtx) newLotAdder(actor string, p Process) (*lotAdder, error) {
	ins, get := w.db.stmt(w.Tx, qLotInsert), w.db.stmt(w.Tx, qLotByCode)
	return &lotAdder{w: w, p: p, actor: actor, ins: ins, get: get, h: sha256.New()}, nil
}

// close ends the adder (its statements belong to the transaction).
func (a *lotAdder) close() {}

// add inserts in (already valid); a lot without a time gets the time of
// the commit. When the lot code is stored, it returns added false and
// leaves in as it was, so that a retry without a time is compared on the
// fields it states.
func (a *lotAdder) add(in *LotInput) (id int64, added bool, err error) {
	t := in.Time
	if t.IsZero() {
		t = a.w.now
	}
	cats := encodeCategories(in.Categories)
	err = a.ins.QueryRow(a.p.ID, in.Lot, t.UnixNano(), in.Shift, in.Inspected, in.Count, cats, in.Inspector, in.Note, a.w.now.UnixNano(), a.actor).Scan(&id)
	if errors.Is(err, sql.ErrNoRows) { // the lot code is stored
		return 0, false, nil
	}
	if err != nil {
		return 0, false, fmt.Errorf("store: add lot %q: %w", in.Lot, err)
	}
	in.Time = t
	if a.n == 0 {
		a.first = id
	}
	a.last = id
	a.n++
	a.buf = appendLotLine(a.buf[:0], in, cats)
	a.h.Write(a.buf)
	if a.n <= maxListed {
		a.listed = append(a.listed, *in)
	}
	return id, true, nil
}

func (a *lotAdder) stored(code string) (Lot, error) {
	var l Lot
	err := scanLot(a.get.QueryRow(a.p.ID, code), &l, a.p.Location())
	return l, err
}

// finish writes the audit entry of the lots added: the ids, their number
// and the SHA-256 over their canonical content;
// small batches carry the full content (of lots, or when lots is nil, of
// the lots added), so that `audit verify` can name a lot changed since.
// The digest is over the lines of appendLotLine, in id order.
func (a *lotAdder) finish(how string, lots []LotInput, extra map[string]any) error {
	if a.n == 0 {
		return nil
	}
	if err := a.w.bumpVersion(a.p.ID, false); err != nil {
		return err
	}
	rec := map[string]any{"process_id": a.p.ID, "first_id": a.first, "last_id": a.last, "count": a.n,
		"sha256": hex.EncodeToString(a.h.Sum(nil))}
	for k, v := range extra {
		rec[k] = v
	}
	if lots == nil && a.n <= maxListed {
		lots = a.listed
	}
	if len(lots) > 0 && len(lots) <= maxListed {
		cs := make([]lotContent, len(lots))
		for i, in := range lots {
			cs[i] = contentOf(in, false)
		}
		rec["lots"] = cs
	}
	return a.w.audit(a.actor, how, "lot", a.first, a.last, nil, rec, "")
}

// activeProcess reads the process lots are added to. The batch keeps what
// it read: the stations posting to one process read it once a batch, not
// once a lot (a change of the process in the batch drops it, see
// updateProcess).
func (w *wtx) activeProcess(id int64) (Process, error) {
	p, ok := w.procs[id]
	if !ok {
		var err error
		p, err = scanProcess(w.db.queryRowIn(w.Tx, qProcessByID, id))
		if errors.Is(err, sql.ErrNoRows) {
			return Process{}, fmt.Errorf("process %d: %w", id, ErrNotFound)
		}
		if err != nil {
			return Process{}, err
		}
		if w.procs == nil {
			w.procs = map[int64]Process{}
		}
		w.procs[id] = p
	}
	if !p.Active {
		return Process{}, errRetired(p)
	}
	return p, nil
}

// AddLots logs lots of a process, all or nothing: any invalid lot gives a
// *ValidationError (Problem.Line is the 1-based position in `in`), a lot
// code already stored with other values gives a *ConflictError
// (errors.Is ErrConflict); nothing is then written. A lot identical to the
// stored one (a repeated submission) is no error: its stored lot is
// returned. Lots with a zero Time get the time of the commit.
//
// Concurrent calls are committed together (group commit) and each call
// returns only once its lots are durable.
func (db *DB) AddLots(ctx context.Context, actor string, processID int64, in []LotInput) ([]Lot, error) {
	if len(in) == 0 {
		return nil, nil
	}
	in = append([]LotInput(nil), in...)
	var out []Lot
	err := db.write(ctx, func(w *wtx) error {
		p, err := w.activeProcess(processID)
		if err != nil {
			return err
		}
		var ps []Problem
		seen := make(map[string]int, len(in))
		for i, l := range in {
			for _, pr := range validateLot(p, l, w.now) {
				pr.Line = i + 1
				ps = append(ps, pr)
			}
			if j, dup := seen[l.Lot]; dup && l.Lot != "" {
				ps = append(ps, Problem{Line: i + 1, Field: "lot", Value: l.Lot, Reason: fmt.Sprintf("is given twice (also at %d)", j+1)})
			}
			seen[l.Lot] = i
		}
		if len(ps) > 0 {
			return invalid(ps...)
		}
		a, err := w.newLotAdder(actor, p)
		if err != nil {
			return err
		}
		defer a.close()
		out = make([]Lot, len(in))
		var conflicts []Conflict
		var fresh []LotInput // the lots added, for the audit entry
		loc := p.Location()
		for i := range in {
			id, added, err := a.add(&in[i])
			if err != nil {
				return err
			}
			if added {
				fresh = append(fresh, in[i])
				out[i] = Lot{ID: id, ProcessID: p.ID, LotInput: in[i], Revision: 1, Recorded: w.now.In(loc), RecordedBy: actor}
				out[i].Time = out[i].Time.In(loc)
				continue
			}
			s, err := a.stored(in[i].Lot)
			if err != nil {
				return err
			}
			if d := differs(s, in[i], allFields(p)); len(d) > 0 {
				conflicts = append(conflicts, Conflict{Line: i + 1, Lot: in[i].Lot, Fields: d})
			}
			out[i] = s
		}
		if len(conflicts) > 0 {
			return &ConflictError{Conflicts: conflicts}
		}
		if err := a.finish("add", fresh, nil); err != nil || a.n == 0 {
			return err
		}
		return w.queueAlertEvents(p.ID, a.first, a.last)
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// Lots returns the lots of a process that are not voided, in time order
// (then id), with from ≤ time < to; a zero bound is open.
func (db *DB) Lots(ctx context.Context, processID int64, from, to time.Time) ([]Lot, error) {
	return db.collectLots(ctx, processID, from, to, readCols)
}

// LotCounts returns what Lots returns with only what judging, charts and
// reviews read: each lot's id, code, time, shift, counts and categories.
// The inspector, note, revision and who recorded it are left empty;
// reading them too takes about twice as long over a whole record, which
// a supervisor waits for when a chart or the board is opened cold. The
// lot page, the API's lot list and exports read them with Lots.
func (db *DB) LotCounts(ctx context.Context, processID int64, from, to time.Time) ([]Lot, error) {
	return db.collectLots(ctx, processID, from, to, countCols)
}

// collectLots gathers the lots Lots describes, reading the columns cols
// (from the replica when it has caught up: see UseReplica).
func (db *DB) collectLots(ctx context.Context, processID int64, from, to time.Time, cols string) ([]Lot, error) {
	p, err := db.Process(ctx, processID)
	if err != nil {
		return nil, err
	}
	lo, hi := timeBounds(from, to)
	var out []Lot
	err = db.readLots(ctx, processID, func(q lotQueryer) error {
		// Counting first (the index alone, no value read) sizes the
		// result once instead of copying it as it grows.
		var n int
		if err := q.QueryRowContext(ctx, `SELECT COUNT(*) FROM `+db.d.lotsRead+`
			WHERE process_id = ? AND voided = 0 AND time BETWEEN ? AND ?`, processID, lo, hi).Scan(&n); err != nil {
			return err
		}
		out = make([]Lot, 0, n)
		return walkLots(ctx, q, p, db.lotsQuery(cols), func(l Lot) error {
			out = append(out, l)
			return nil
		}, processID, lo, hi)
	})
	if len(out) == 0 {
		out = nil
	}
	return out, err
}

// EachLot calls fn with each lot that Lots would return, streaming, so
// memory does not grow with the number of lots. An error from fn stops
// the walk and is returned. It reads the primary, even with a replica:
// what fn was handed cannot be taken back if the replica fails midway.
func (db *DB) EachLot(ctx context.Context, processID int64, from, to time.Time, fn func(Lot) error) error {
	p, err := db.Process(ctx, processID)
	if err != nil {
		return err
	}
	lo, hi := timeBounds(from, to)
	return walkLots(ctx, db.r, p, db.lotsQuery(readCols), fn, processID, lo, hi)
}

// lotsQuery selects cols of a process's lots that are not voided, in a
// span of time, in time order: one scan of the covering index lots_read,
// which holds every column of a lot in time order, no lookup in the
// table.
func (db *DB) lotsQuery(cols string) string {
	return `SELECT ` + cols + ` FROM ` + db.d.lotsRead + `
		WHERE process_id = ? AND voided = 0 AND time BETWEEN ? AND ? ORDER BY time, id`
}

// timeBounds are the stored times of from ≤ time < to, both ends
// inclusive; a zero bound is open.
func timeBounds(from, to time.Time) (lo, hi int64) {
	lo, hi = -1<<63, 1<<63-1
	if !from.IsZero() {
		lo = from.UnixNano()
	}
	if !to.IsZero() {
		hi = to.UnixNano() - 1
	}
	return lo, hi
}

// LotCountsAddedAfter returns, as LotCounts does, the lots of a process
// with an id above afterID that are not voided, in time order (then id):
// with LotsVersion, what a reader holding the lots up to afterID lacks
// when only lots were added.
func (db *DB) LotCountsAddedAfter(ctx context.Context, processID, afterID int64) ([]Lot, error) {
	p, err := db.Process(ctx, processID)
	if err != nil {
		return nil, err
	}
	var out []Lot
	err = db.readLots(ctx, processID, func(q lotQueryer) error {
		out = nil
		return walkLots(ctx, q, p, `SELECT `+countCols+` FROM lots
			WHERE id > ? AND process_id = ? AND voided = 0 ORDER BY time, id`, func(l Lot) error {
			out = append(out, l)
			return nil
		}, afterID, processID)
	})
	return out, err
}

// The columns walkLots reads: readCols, those of a lot that is not
// voided but its process; countCols, the first of them, what LotCounts
// reads.
const (
	countCols = "id, lot, time, shift, inspected, count, categories"
	readCols  = countCols + ", inspector, note, revision, recorded, recorded_by, reason"
)

// walkLots runs query on q (selecting readCols or countCols) and calls fn
// with each lot of process p, as EachLot describes. Each lot gets a
// Categories map of its own; lots mostly repeat a few combinations of
// category counts, so each stored form met is decoded once and copied
// after that.
func walkLots(ctx context.Context, q lotQueryer, p Process, query string, fn func(Lot) error, args ...any) error {
	loc := p.Location()
	rows, err := q.QueryContext(ctx, query, args...)
	if err != nil {
		return err
	}
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		return err
	}
	decoded := map[string]map[string]int64{}
	var cats sql.RawBytes
	// One Lot is scanned into and handed to fn by value: the pointers
	// Scan takes would otherwise move a new Lot to the heap for each row.
	var l Lot
	var t, rec, rev int64 // (database/sql converts an int64 to an int64 directly)
	dest := []any{&l.ID, &l.Lot, &t, &l.Shift, &l.Inspected, &l.Count, &cats, &l.Inspector, &l.Note, &rev, &rec, &l.RecordedBy, &l.Reason}
	dest = dest[:len(cols)]
	for rows.Next() {
		l = Lot{ProcessID: p.ID}
		if err := rows.Scan(dest...); err != nil {
			return err
		}
		l.Revision = int(rev)
		l.Time, l.Recorded = fromNanos(t, loc), fromNanos(rec, loc)
		if len(cats) > 0 {
			m, ok := decoded[string(cats)]
			if !ok {
				if m, err = decodeCategories(string(cats)); err != nil {
					return fmt.Errorf("store: lot %d: categories: %w", l.ID, err)
				}
				decoded[string(cats)] = m
			}
			l.Categories = maps.Clone(m)
		}
		if err := fn(l); err != nil {
			return err
		}
	}
	return rows.Err()
}

// LotByID returns a lot in its current revision (voided or not).
func (db *DB) LotByID(ctx context.Context, id int64) (Lot, error) {
	return lotByID(ctx, db.r, id)
}

type ctxQueryer interface {
	QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row
}

func lotByID(ctx context.Context, q ctxQueryer, id int64) (Lot, error) {
	var l Lot
	var tz string
	row := q.QueryRowContext(ctx, `SELECT l.id, l.process_id, l.lot, l.time, l.shift, l.inspected, l.count, l.categories, l.inspector, l.note,
		l.revision, l.voided, l.recorded, l.recorded_by, l.reason, p.time_zone FROM lots l JOIN processes p ON p.id = l.process_id WHERE l.id = ?`, id)
	var t, rec int64
	var cats string
	err := row.Scan(&l.ID, &l.ProcessID, &l.Lot, &t, &l.Shift, &l.Inspected, &l.Count, &cats, &l.Inspector, &l.Note, &l.Revision, &l.Voided, &rec, &l.RecordedBy, &l.Reason, &tz)
	if errors.Is(err, sql.ErrNoRows) {
		return Lot{}, fmt.Errorf("lot %d: %w", id, ErrNotFound)
	}
	if err != nil {
		return Lot{}, err
	}
	loc := Process{TimeZone: tz}.Location()
	l.Time, l.Recorded = fromNanos(t, loc), fromNanos(rec, loc)
	l.Categories, err = decodeCategories(cats)
	return l, err
}

// keepRevision copies the current revision of a lot to lot_revisions.
func (w *wtx) keepRevision(id int64) error {
	_, err := w.Exec(`INSERT INTO lot_revisions (lot_id, revision, lot, time, shift, inspected, count, categories, inspector, note, voided, recorded, recorded_by, reason)
		SELECT id, revision, lot, time, shift, inspected, count, categories, inspector, note, voided, recorded, recorded_by, reason FROM lots WHERE id = ?`, id)
	return err
}

func needReason(reason string) error {
	if ps := checkReason(reason, "say why the lot changes"); len(ps) > 0 {
		return invalid(ps...)
	}
	return nil
}

// CorrectLot replaces the values of a lot with in and records why. The
// earlier revision is kept (LotHistory). A voided lot cannot be corrected.
// A zero in.Time keeps the lot's time.
func (db *DB) CorrectLot(ctx context.Context, actor, reason string, id int64, in LotInput) (Lot, error) {
	if err := needReason(reason); err != nil {
		return Lot{}, err
	}
	var out Lot
	err := db.write(ctx, func(w *wtx) error {
		old, err := lotByID(ctx, w.Tx, id)
		if err != nil {
			return err
		}
		if old.Voided {
			return invalid(Problem{Field: "lot", Value: old.Lot, Reason: "is voided and cannot be corrected"})
		}
		p, err := processByID(w.Tx, old.ProcessID)
		if err != nil {
			return err
		}
		if in.Time.IsZero() {
			in.Time = old.Time
		}
		if ps := validateLot(p, in, w.now); len(ps) > 0 {
			return invalid(ps...)
		}
		if err := w.keepRevision(id); err != nil {
			return err
		}
		loc := p.Location()
		out = Lot{ID: id, ProcessID: p.ID, LotInput: in, Revision: old.Revision + 1, Recorded: w.now.In(loc), RecordedBy: actor, Reason: reason}
		out.Time = in.Time.In(loc)
		_, err = w.Exec(`UPDATE lots SET lot = ?, time = ?, shift = ?, inspected = ?, count = ?, categories = ?, inspector = ?, note = ?,
			revision = revision + 1, recorded = ?, recorded_by = ?, reason = ? WHERE id = ?`,
			in.Lot, in.Time.UnixNano(), in.Shift, in.Inspected, in.Count, encodeCategories(in.Categories), in.Inspector, in.Note, w.now.UnixNano(), actor, reason, id)
		if isUnique(err) {
			return &ConflictError{Conflicts: []Conflict{{Lot: in.Lot, Fields: []string{"lot"}}}}
		}
		if err != nil {
			return err
		}
		if err := w.bumpVersion(p.ID, true); err != nil {
			return err
		}
		if err := w.audit(actor, "correct", "lot", id, id, contentOf(old.LotInput, false), contentOf(in, false), reason); err != nil {
			return err
		}
		return w.queueAlertCorrection(p.ID, id, old.Time, in.Time, fmt.Sprintf("lot %s corrected by %s: %s", in.Lot, actor, reason))
	})
	if err != nil {
		return Lot{}, err
	}
	return out, nil
}

// VoidLot takes a lot out of the charts and records why; its values stay
// (LotHistory). Voiding a voided lot is an error.
func (db *DB) VoidLot(ctx context.Context, actor, reason string, id int64) error {
	if err := needReason(reason); err != nil {
		return err
	}
	return db.write(ctx, func(w *wtx) error {
		old, err := lotByID(ctx, w.Tx, id)
		if err != nil {
			return err
		}
		if old.Voided {
			return invalid(Problem{Field: "lot", Value: old.Lot, Reason: "is already voided"})
		}
		if err := w.keepRevision(id); err != nil {
			return err
		}
		p, err := processByID(w.Tx, old.ProcessID)
		if err != nil {
			return err
		}
		if _, err := w.Exec("UPDATE lots SET voided = 1, revision = revision + 1, recorded = ?, recorded_by = ?, reason = ? WHERE id = ?",
			w.now.UnixNano(), actor, reason, id); err != nil {
			return err
		}
		if err := w.bumpVersion(p.ID, true); err != nil {
			return err
		}
		if err := w.audit(actor, "void", "lot", id, id, contentOf(old.LotInput, false), contentOf(old.LotInput, true), reason); err != nil {
			return err
		}
		return w.queueAlertFollowing(p.ID, id, old.Time, false, fmt.Sprintf("lot %s voided by %s: %s", old.Lot, actor, reason))
	})
}

// LotHistory returns every revision of a lot, oldest first; the last is
// the current one.
func (db *DB) LotHistory(ctx context.Context, id int64) ([]Lot, error) {
	tx, err := db.r.BeginTx(ctx, &sql.TxOptions{ReadOnly: true})
	if err != nil {
		return nil, err
	}
	defer tx.Rollback()
	cur, err := lotByID(ctx, tx, id)
	if err != nil {
		return nil, err
	}
	var tz string
	if err := tx.QueryRowContext(ctx, "SELECT time_zone FROM processes WHERE id = ?", cur.ProcessID).Scan(&tz); err != nil {
		return nil, err
	}
	loc := Process{TimeZone: tz}.Location()
	rows, err := tx.QueryContext(ctx, `SELECT lot_id, CAST(? AS BIGINT), lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by, reason
		FROM lot_revisions WHERE lot_id = ? ORDER BY revision`, cur.ProcessID, id)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Lot
	for rows.Next() {
		var l Lot
		if err := scanLot(rows, &l, loc); err != nil {
			return nil, err
		}
		out = append(out, l)
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return append(out, cur), nil
}
