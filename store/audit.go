package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"time"
)

// AuditEntry is one recorded change: who, when, what (entity and id),
// the values before and after as JSON, and why.
type AuditEntry struct {
	Seq      int64
	At       time.Time
	Actor    string
	Action   string // e.g. "add", "correct", "void", "freeze"
	Entity   string // "user", "token", "process", "lot", "limitset", "annotation"
	EntityID int64
	EntityTo int64  // last id of a batch of lots, else EntityID
	Old, New string // JSON; "" when none
	Reason   string
	PrevHash string
	Hash     string
}

// AuditCheck is the outcome of VerifyAudit. FirstBroken is the seq of the
// first entry that does not hold (0 when OK, or when the break is in the
// chain head: then Why says so). When the chain holds but a data row does
// not agree with it, Entity names the row (e.g. `lot 1234 (process "Line
// 2", lot code H2-17)`), FirstBroken is the entry the row disagrees with
// (0 for a row no entry mentions) and Why is the whole sentence.
type AuditCheck struct {
	OK          bool
	Entries     int
	FirstBroken int64
	Entity      string
	Why         string
	Head        string // hash of the last entry
}

type chainHead struct {
	seq  int64
	hash string
}

// entryHash is SHA-256 over the previous hash and the canonical content of
// the entry: a JSON array of its fields in a fixed order (FIPS 180-4 for
// SHA-256; the JSON encoding of strings and integers is deterministic).
func entryHash(e *AuditEntry) string {
	content, _ := json.Marshal([]any{e.Seq, e.At.UnixNano(), e.Actor, e.Action, e.Entity, e.EntityID, e.EntityTo, e.Old, e.New, e.Reason})
	h := sha256.New()
	h.Write([]byte(e.PrevHash))
	h.Write([]byte{'\n'})
	h.Write(content)
	return hex.EncodeToString(h.Sum(nil))
}

// checkChain reads the chain head once at open: a database without one is
// not a lotwatch database.
func checkChain(ctx context.Context, q interface {
	QueryRowContext(context.Context, string, ...any) *sql.Row
}) error {
	var head chainHead
	return q.QueryRowContext(ctx, qHeadSelect).Scan(&head.seq, &head.hash)
}

func toJSON(v any) string {
	if v == nil {
		return ""
	}
	b, err := json.Marshal(v)
	if err != nil {
		panic("store: audit value not JSON: " + err.Error())
	}
	return string(b)
}

// audit records one entry of the audit trail in the writer transaction.
// The entry is chained and written when the batch ends (settle), with the
// batch's other entries.
func (w *wtx) audit(actor, action, entity string, id, to int64, old, new any, reason string) error {
	w.entries = append(w.entries, AuditEntry{At: w.now, Actor: actor, Action: action, Entity: entity,
		EntityID: id, EntityTo: to, Old: toJSON(old), New: toJSON(new), Reason: reason})
	return nil
}

// appendAudit writes e as the entry after head (filling Seq, PrevHash and
// Hash) and moves the chain head in audit_head; it returns the new head.
// db may be nil (during a migration).
func (db *DB) appendAudit(tx *sql.Tx, head chainHead, e *AuditEntry) (chainHead, error) {
	es := []AuditEntry{*e}
	head, err := db.insertAudit(tx, head, es)
	if err != nil {
		return head, err
	}
	*e = es[0]
	return head, db.moveHead(tx, head)
}

// auditRowsPerInsert bounds the rows of one INSERT (12 values each; SQLite
// takes up to 32,766 values in a statement, PostgreSQL 65,535).
const auditRowsPerInsert = 64

// insertAudit writes es as the entries after head, in order (filling their
// Seq, PrevHash and Hash), and returns the new head, leaving audit_head
// to moveHead. Several entries go in one statement: a batch's entries
// cost a round trip to PostgreSQL, not one each.
func (db *DB) insertAudit(tx *sql.Tx, head chainHead, es []AuditEntry) (chainHead, error) {
	for len(es) > 0 {
		n := min(len(es), auditRowsPerInsert)
		args := make([]any, 0, 12*n)
		for i := range es[:n] {
			e := &es[i]
			e.Seq, e.PrevHash = head.seq+1, head.hash
			e.Hash = entryHash(e)
			head = chainHead{e.Seq, e.Hash}
			args = append(args, e.Seq, e.At.UnixNano(), e.Actor, e.Action, e.Entity, e.EntityID, e.EntityTo, e.Old, e.New, e.Reason, e.PrevHash, e.Hash)
		}
		q := qAuditInsert
		if n > 1 {
			q += strings.Repeat(", (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", n-1)
		}
		if _, err := db.execIn(tx, q, args...); err != nil {
			return head, fmt.Errorf("store: audit: %w", err)
		}
		es = es[n:]
	}
	return head, nil
}

// moveHead records head as the chain's last entry.
func (db *DB) moveHead(tx *sql.Tx, head chainHead) error {
	if _, err := db.execIn(tx, qHeadUpdate, head.seq, head.hash); err != nil {
		return fmt.Errorf("store: audit head: %w", err)
	}
	return nil
}

const auditCols = "seq, at, actor, action, entity, entity_id, entity_to, old, new, reason, prev_hash, hash"

func scanAudit(rows *sql.Rows) (AuditEntry, error) {
	var e AuditEntry
	var at int64
	err := rows.Scan(&e.Seq, &at, &e.Actor, &e.Action, &e.Entity, &e.EntityID, &e.EntityTo, &e.Old, &e.New, &e.Reason, &e.PrevHash, &e.Hash)
	e.At = time.Unix(0, at).UTC()
	return e, err
}

// VerifyAudit walks the audit chain: seq numbers must run 1, 2, … without
// a gap, each entry must name the hash of the one before and its own hash
// must recompute from its content, and the last entry must match the chain
// head kept in audit_head. So an entry edited, inserted or removed with
// plain SQL is found — also the last one. Then every data row the trail
// covers (lots with their category counts and revisions, processes, limit
// sets, annotations, users' role and active state, tokens) must hold the
// values of the latest entry about it, so a row edited, added or removed
// with plain SQL is found and named too (see dataTrail). It reads the
// whole database in one snapshot. Limit: someone who rewrites the
// whole chain and the head with recomputed hashes is not detected from the
// file alone; compare Head with a value noted elsewhere (it is printed by
// `lotwatch audit verify`) to anchor it.
func (db *DB) VerifyAudit(ctx context.Context) (AuditCheck, error) {
	return verifyAudit(ctx, db.r, db.d.snapshot)
}

// verifyAudit checks the database of q in one read transaction of
// isolation iso (one snapshot of the whole database).
func verifyAudit(ctx context.Context, q *sql.DB, iso sql.IsolationLevel) (AuditCheck, error) {
	tx, err := q.BeginTx(ctx, &sql.TxOptions{ReadOnly: true, Isolation: iso})
	if err != nil {
		return AuditCheck{}, err
	}
	defer tx.Rollback()
	var head chainHead
	if err := tx.QueryRowContext(ctx, "SELECT seq, hash FROM audit_head WHERE id = 1").Scan(&head.seq, &head.hash); err != nil {
		if errors.Is(err, sql.ErrNoRows) {
			return AuditCheck{Why: "the audit chain head is missing"}, nil
		}
		return AuditCheck{}, err
	}
	rows, err := tx.QueryContext(ctx, "SELECT "+auditCols+" FROM audit ORDER BY seq")
	if err != nil {
		return AuditCheck{}, err
	}
	defer rows.Close()
	var c AuditCheck
	prev := chainHead{}
	trail := newDataTrail()
	trail.side = q
	for rows.Next() {
		e, err := scanAudit(rows)
		if err != nil {
			return AuditCheck{}, err
		}
		c.Entries++
		switch {
		case e.Seq != prev.seq+1:
			c.FirstBroken, c.Why = prev.seq+1, fmt.Sprintf("entry %d is missing (next entry is %d)", prev.seq+1, e.Seq)
		case e.PrevHash != prev.hash:
			c.FirstBroken, c.Why = e.Seq, fmt.Sprintf("entry %d does not follow from entry %d (previous hash differs)", e.Seq, prev.seq)
		case entryHash(&e) != e.Hash:
			c.FirstBroken, c.Why = e.Seq, fmt.Sprintf("entry %d was altered (its content does not match its hash)", e.Seq)
		}
		if c.FirstBroken != 0 {
			return c, nil
		}
		if err := trail.note(&e); err != nil {
			return AuditCheck{}, err
		}
		prev = chainHead{e.Seq, e.Hash}
	}
	if err := rows.Err(); err != nil {
		return AuditCheck{}, err
	}
	if prev != head {
		switch {
		case head.seq > prev.seq: // entries removed from the end
			c.FirstBroken = prev.seq + 1
		case head.seq < prev.seq: // entries appended without the head
			c.FirstBroken = head.seq + 1
		default:
			c.FirstBroken = head.seq
		}
		c.Why = fmt.Sprintf("the chain ends at entry %d but the chain head records entry %d (an entry was removed or added behind lotwatch's back)", prev.seq, head.seq)
		return c, nil
	}
	rows.Close()
	rb, err := trail.checkRows(ctx, tx)
	if err != nil {
		return AuditCheck{}, err
	}
	if rb != nil {
		c.FirstBroken, c.Entity = rb.seq, rb.entity
		c.Why = rb.entity + ": " + rb.why
		if rb.seq > 0 {
			c.Why += fmt.Sprintf(" (entry %d)", rb.seq)
		}
		return c, nil
	}
	c.OK, c.Head = true, head.hash
	return c, nil
}

// AuditFor lists the entries about one entity, oldest first. For "lot"
// it includes the batch entries whose id range holds id.
func (db *DB) AuditFor(ctx context.Context, entity string, id int64) ([]AuditEntry, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT "+auditCols+" FROM audit WHERE entity = ? AND entity_id <= ? AND entity_to >= ? ORDER BY seq", entity, id, id)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []AuditEntry
	for rows.Next() {
		e, err := scanAudit(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, e)
	}
	return out, rows.Err()
}
