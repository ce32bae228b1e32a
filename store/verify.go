package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"sort"
	"time"

	"lotwatch/spc"
)

// The audit trail states the values of every data row it covers: a batch
// entry of lots carries the SHA-256 over the lots' canonical lines (see
// appendLotLine) and, for up to 20 lots, their content; every other
// entry (a correction, a void, a process, limit set, annotation, user or
// token written) carries the row's values in New, and its time, actor and
// reason are the row's recorded time, author and reason. VerifyAudit, once
// the chain holds, reads every current row and checks it against the
// latest entry about it, so that a row edited, added or removed with plain
// SQL is found and named.

// dataTrail collects, while the chain is walked, what each row must hold.
type dataTrail struct {
	// side reads an audit entry while the transaction is reading rows
	// (a PostgreSQL connection reads one result at a time); entries never
	// change, so any connection reads the same.
	side    *sql.DB
	batches []lotBatch
	edits   map[int64][]lotEdit
	procs   map[int64]*rowTrail
	sets    map[int64]*rowTrail
	anns    map[int64]*rowTrail
	users   map[int64]*rowTrail
	tokens  map[int64]*rowTrail
	alerts  map[int64]*rowTrail
	actors  map[string]string
}

// lotBatch is an entry that added lots first..last.
type lotBatch struct {
	seq, first, last, pid, at int64
	count                     int
	actor                     string
	sha                       string
}

// lotEdit is a correction or void of a lot: the values after it.
type lotEdit struct {
	seq, at             int64
	actor, reason, next string
}

// rowTrail is what the entries say of one row.
type rowTrail struct {
	addSeq, addAt int64
	addActor      string
	addNew        string
	seq, at       int64 // latest entry stating the row's values
	actor, reason string
	next          string // its New
	closeSeq      int64  // annotations: the close entry
	closeAt       int64
	closeActor    string
	revoked       bool   // tokens
	cred          string // users and tokens: the latest credentialDigest stated ("" in entries before the trail stated them)
}

func newDataTrail() *dataTrail {
	return &dataTrail{edits: map[int64][]lotEdit{}, procs: map[int64]*rowTrail{}, sets: map[int64]*rowTrail{},
		anns: map[int64]*rowTrail{}, users: map[int64]*rowTrail{}, tokens: map[int64]*rowTrail{}, alerts: map[int64]*rowTrail{}, actors: map[string]string{}}
}

func (d *dataTrail) actor(s string) string {
	if a, ok := d.actors[s]; ok {
		return a
	}
	d.actors[s] = s
	return s
}

// note takes in one entry of the chain (already checked).
func (d *dataTrail) note(e *AuditEntry) error {
	at := e.At.UnixNano()
	added := func(m map[int64]*rowTrail) {
		m[e.EntityID] = &rowTrail{addSeq: e.Seq, addAt: at, addActor: d.actor(e.Actor), addNew: e.New,
			seq: e.Seq, at: at, actor: d.actor(e.Actor), reason: e.Reason, next: e.New}
	}
	changed := func(m map[int64]*rowTrail) *rowTrail {
		t := m[e.EntityID]
		if t == nil { // a change of a row never added: the row must not exist
			t = &rowTrail{}
			m[e.EntityID] = t
		}
		t.seq, t.at, t.actor, t.reason, t.next = e.Seq, at, d.actor(e.Actor), e.Reason, e.New
		return t
	}
	switch e.Entity {
	case "lot":
		switch e.Action {
		case "add", "import":
			var rec struct {
				ProcessID int64  `json:"process_id"`
				FirstID   int64  `json:"first_id"`
				LastID    int64  `json:"last_id"`
				Count     int    `json:"count"`
				SHA256    string `json:"sha256"`
			}
			if err := json.Unmarshal([]byte(e.New), &rec); err != nil {
				return fmt.Errorf("entry %d: %w", e.Seq, err)
			}
			d.batches = append(d.batches, lotBatch{seq: e.Seq, first: rec.FirstID, last: rec.LastID, pid: rec.ProcessID,
				at: at, count: rec.Count, actor: d.actor(e.Actor), sha: rec.SHA256})
		case "correct", "void":
			d.edits[e.EntityID] = append(d.edits[e.EntityID], lotEdit{seq: e.Seq, at: at, actor: d.actor(e.Actor), reason: e.Reason, next: e.New})
		}
	case "process":
		switch e.Action {
		case "add":
			added(d.procs)
		case "update":
			changed(d.procs)
		}
	case "limitset":
		if e.Action == "freeze" {
			added(d.sets)
		}
	case "annotation":
		switch e.Action {
		case "add":
			added(d.anns)
		case "close":
			t := changed(d.anns)
			t.closeSeq, t.closeAt, t.closeActor = e.Seq, at, t.actor
		}
	case "user":
		switch e.Action {
		case "add":
			added(d.users)
			var u userAudit
			decodeRecord(e.New, &u)
			d.users[e.EntityID].cred = u.Password
		case "set active":
			changed(d.users)
		case "set password", "state credentials":
			d.stateCredential(d.users, e)
		}
	case "token":
		switch e.Action {
		case "add":
			added(d.tokens)
			var tk tokenAudit
			decodeRecord(e.New, &tk)
			d.tokens[e.EntityID].cred = tk.Hash
		case "revoke":
			changed(d.tokens).revoked = true
		case "state credentials":
			d.stateCredential(d.tokens, e)
		}
	case "alertrule":
		switch e.Action {
		case "add":
			added(d.alerts)
		case "remove":
			changed(d.alerts)
		}
	}
	return nil
}

// stateCredential notes the password or token hash an entry states
// (entries before schema 5 state none: then nothing is noted).
func (d *dataTrail) stateCredential(m map[int64]*rowTrail, e *AuditEntry) {
	var c credentialAudit
	if !decodeRecord(e.New, &c) {
		return
	}
	t := m[e.EntityID]
	if t == nil { // a credential of a row never added: the row must not exist
		t = &rowTrail{}
		m[e.EntityID] = t
	}
	if t.cred = c.Password; t.cred == "" {
		t.cred = c.Hash
	}
	t.seq = max(t.seq, e.Seq)
}

// credentialDiffers reports a stored password or token hash that is not
// the one the trail last stated.
func credentialDiffers(t *rowTrail, stored []byte) bool {
	return t.cred != "" && credentialDigest(stored) != t.cred
}

// rowBreak is a data row that does not agree with the audit trail.
type rowBreak struct {
	seq    int64
	entity string
	why    string
}

func differ(seq int64, entity string) *rowBreak {
	return &rowBreak{seq, entity, "stored values differ from the audit trail"}
}

func unrecorded(entity string) *rowBreak {
	return &rowBreak{0, entity, "is not in the audit trail (added behind lotwatch's back)"}
}

func removed(seq int64, entity string) *rowBreak {
	return &rowBreak{seq, entity, "was removed behind lotwatch's back"}
}

type procInfo struct {
	name string
	cats []string
}

// checkRows checks every covered row against the trail; nil when all hold.
func (d *dataTrail) checkRows(ctx context.Context, tx *sql.Tx) (*rowBreak, error) {
	procs := map[int64]procInfo{}
	steps := []func(context.Context, *sql.Tx, map[int64]procInfo) (*rowBreak, error){
		d.checkProcesses, d.checkUsers, d.checkTokens, d.checkLots, d.checkLimitSets, d.checkAnnotations, d.checkAlertRules}
	for _, step := range steps {
		if rb, err := step(ctx, tx, procs); rb != nil || err != nil {
			return rb, err
		}
	}
	return nil, nil
}

// leftover names a row the trail added that is not stored.
func leftover(m map[int64]*rowTrail, seen map[int64]bool, name func(id int64) string) *rowBreak {
	ids := make([]int64, 0)
	for id := range m {
		if !seen[id] {
			ids = append(ids, id)
		}
	}
	if len(ids) == 0 {
		return nil
	}
	sort.Slice(ids, func(i, j int) bool { return ids[i] < ids[j] })
	t := m[ids[0]]
	return removed(max(t.addSeq, t.seq), name(ids[0]))
}

func (d *dataTrail) checkProcesses(ctx context.Context, tx *sql.Tx, procs map[int64]procInfo) (*rowBreak, error) {
	rows, err := tx.QueryContext(ctx, "SELECT "+processCols+" FROM processes ORDER BY id")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	seen := map[int64]bool{}
	for rows.Next() {
		p, err := scanProcess(rows)
		if err != nil {
			return nil, err
		}
		procs[p.ID] = procInfo{p.Name, p.Categories}
		seen[p.ID] = true
		name := fmt.Sprintf("process %d (%q)", p.ID, p.Name)
		t := d.procs[p.ID]
		switch {
		case t == nil || t.addSeq == 0:
			return unrecorded(name), nil
		case toJSON(auditProcess(p)) != t.next || nanos(p.Created) != t.addAt:
			return differ(t.seq, name), nil
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return leftover(d.procs, seen, func(id int64) string { return fmt.Sprintf("process %d", id) }), nil
}

func (d *dataTrail) checkUsers(ctx context.Context, tx *sql.Tx, _ map[int64]procInfo) (*rowBreak, error) {
	rows, err := tx.QueryContext(ctx, "SELECT "+userCols+", password_hash FROM users ORDER BY id")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	seen := map[int64]bool{}
	for rows.Next() {
		var u User
		var created int64
		var hash string
		if err := rows.Scan(&u.ID, &u.Name, &u.Role, &u.Active, &created, &hash); err != nil {
			return nil, err
		}
		seen[u.ID] = true
		name := fmt.Sprintf("user %d (%q)", u.ID, u.Name)
		t := d.users[u.ID]
		var stated userAudit
		switch {
		case t == nil || t.addSeq == 0:
			return unrecorded(name), nil
		case !decodeRecord(t.next, &stated):
			return differ(t.seq, name), nil
		case (userAudit{stated.Name, stated.Role, stated.Active, ""}) != (userAudit{u.Name, u.Role, u.Active, ""}) || created != t.addAt:
			return differ(t.seq, name), nil
		case credentialDiffers(t, []byte(hash)):
			return &rowBreak{t.seq, name, "its password hash differs from the audit trail (set behind lotwatch's back)"}, nil
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return leftover(d.users, seen, func(id int64) string { return fmt.Sprintf("user %d", id) }), nil
}

func (d *dataTrail) checkTokens(ctx context.Context, tx *sql.Tx, _ map[int64]procInfo) (*rowBreak, error) {
	rows, err := tx.QueryContext(ctx, `SELECT t.id, t.label, t.created, t.revoked, COALESCE(u.name, ''), t.hash
		FROM tokens t LEFT JOIN users u ON u.id = t.user_id ORDER BY t.id`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	seen := map[int64]bool{}
	for rows.Next() {
		var id, created int64
		var label, user string
		var revoked bool
		var hash []byte
		if err := rows.Scan(&id, &label, &created, &revoked, &user, &hash); err != nil {
			return nil, err
		}
		seen[id] = true
		name := fmt.Sprintf("token %d (%q of user %q)", id, label, user)
		t := d.tokens[id]
		var stated tokenAudit
		switch {
		case t == nil || t.addSeq == 0:
			return unrecorded(name), nil
		case !decodeRecord(t.addNew, &stated) || stated.Label != label || stated.User != user || created != t.addAt || revoked != t.revoked:
			return differ(t.seq, name), nil
		case credentialDiffers(t, hash):
			return &rowBreak{t.seq, name, "its hash differs from the audit trail (replaced behind lotwatch's back)"}, nil
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return leftover(d.tokens, seen, func(id int64) string { return fmt.Sprintf("token %d", id) }), nil
}

func (d *dataTrail) checkLimitSets(ctx context.Context, tx *sql.Tx, procs map[int64]procInfo) (*rowBreak, error) {
	rows, err := tx.QueryContext(ctx, `SELECT id, process_id, number, method, k, center, sigma_z, baseline_from, baseline_to, baseline_lots, excluded, effective_from, frozen_by, frozen_at, reason,
		cusum_shift, cusum_arl0, cusum_h, ewma_lambda, ewma_width, ewma_arl0
		FROM limit_sets ORDER BY id`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	seen := map[int64]bool{}
	for rows.Next() {
		var id, pid, bf, bt, ef, fa int64
		var number, blots int
		var method, excl, by, reason string
		var k, center, sz float64
		var m spc.Monitors
		if err := rows.Scan(&id, &pid, &number, &method, &k, &center, &sz, &bf, &bt, &blots, &excl, &ef, &by, &fa, &reason,
			&m.CUSUMShift, &m.CUSUMARL0, &m.CUSUMH, &m.EWMALambda, &m.EWMAWidth, &m.EWMAARL0); err != nil {
			return nil, err
		}
		seen[id] = true
		name := fmt.Sprintf("limit set %d (number %d of process %q)", id, number, procs[pid].name)
		t := d.sets[id]
		if t == nil || t.addSeq == 0 {
			return unrecorded(name), nil
		}
		ex := map[string]string{}
		if err := json.Unmarshal([]byte(excl), &ex); err != nil {
			return differ(t.seq, name), nil
		}
		rec := limitSetRecord(LimitSet{ProcessID: pid, Number: number, Method: spc.Method(method), K: k, Center: center, SigmaZ: sz,
			BaselineFrom: fromNanos(bf, time.UTC), BaselineTo: fromNanos(bt, time.UTC), BaselineLots: blots, Excluded: ex, EffectiveFrom: time.Unix(0, ef), Monitors: m})
		if toJSON(rec) != t.next || by != t.actor || fa != t.at || reason != t.reason {
			return differ(t.seq, name), nil
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return leftover(d.sets, seen, func(id int64) string { return fmt.Sprintf("limit set %d", id) }), nil
}

func (d *dataTrail) checkAnnotations(ctx context.Context, tx *sql.Tx, procs map[int64]procInfo) (*rowBreak, error) {
	rows, err := tx.QueryContext(ctx, `SELECT id, process_id, lot_id, rule, cause, action, closed, by, at, closed_by, closed_at, no_cause, reason FROM annotations ORDER BY id`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	seen := map[int64]bool{}
	for rows.Next() {
		var a annotationAudit
		var id, at, closedAt int64
		var lotID sql.NullInt64
		var by, closedBy string
		if err := rows.Scan(&id, &a.ProcessID, &lotID, &a.Rule, &a.Cause, &a.Action, &a.Closed, &by, &at, &closedBy, &closedAt, &a.NoCause, &a.Reason); err != nil {
			return nil, err
		}
		a.LotID = lotID.Int64
		seen[id] = true
		name := fmt.Sprintf("annotation %d (process %q)", id, procs[a.ProcessID].name)
		t := d.anns[id]
		if t == nil || t.addSeq == 0 {
			return unrecorded(name), nil
		}
		wantBy, wantAt := "", int64(0)
		switch {
		case t.closeSeq != 0:
			wantBy, wantAt = t.closeActor, t.closeAt
		case a.Closed:
			wantBy, wantAt = t.addActor, t.addAt
		}
		if toJSON(a) != t.next || by != t.addActor || at != t.addAt || closedBy != wantBy || closedAt != wantAt {
			return differ(t.seq, name), nil
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return leftover(d.anns, seen, func(id int64) string { return fmt.Sprintf("annotation %d", id) }), nil
}

func (d *dataTrail) checkAlertRules(ctx context.Context, tx *sql.Tx, _ map[int64]procInfo) (*rowBreak, error) {
	rows, err := tx.QueryContext(ctx, "SELECT "+alertRuleCols+" FROM alert_rules r LEFT JOIN processes p ON p.id = r.process_id ORDER BY r.id")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	seen := map[int64]bool{}
	for rows.Next() {
		r, err := scanAlertRule(rows)
		if err != nil {
			return nil, err
		}
		seen[r.ID] = true
		name := fmt.Sprintf("alert rule %d (process %q)", r.ID, r.Process)
		t := d.alerts[r.ID]
		switch {
		case t == nil || t.addSeq == 0:
			return unrecorded(name), nil
		case toJSON(auditAlertRule(r)) != t.next || nanos(r.Created) != t.addAt || r.CreatedBy != t.addActor:
			return differ(t.seq, name), nil
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return leftover(d.alerts, seen, func(id int64) string { return fmt.Sprintf("alert rule %d", id) }), nil
}
