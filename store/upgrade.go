package store

import (
	"crypto/sha256"
	"database/sql"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"sort"
	"time"
)

// upgrades are the steps of migrations that SQL alone cannot do; each
// runs after the migration's SQL, in its transaction.
var upgrades = map[int]func(tx *sql.Tx, m migration) error{
	2: upgradePackedLots,
	5: upgradeCredentials,
}

// upgradeCredentials states in the audit trail the password hash of
// every user and the hash of every token stored before the trail stated
// them (migration 0005): one "state credentials" entry each, as the
// SHA-256 of the stored hash. A database without an audit trail (a new
// one) gets none. From here on `audit verify` names a hash changed behind
// lotwatch's back; a change made before the upgrade cannot be told.
func upgradeCredentials(tx *sql.Tx, m migration) error {
	var head chainHead
	if err := tx.QueryRow("SELECT seq, hash FROM audit_head WHERE id = 1").Scan(&head.seq, &head.hash); err != nil {
		return err
	}
	if head.seq == 0 {
		return nil
	}
	type cred struct {
		entity string
		id     int64
		rec    credentialAudit
	}
	var creds []cred
	for _, q := range []string{"SELECT 'user', id, password_hash FROM users ORDER BY id", "SELECT 'token', id, hash FROM tokens ORDER BY id"} {
		rows, err := tx.Query(q)
		if err != nil {
			return err
		}
		for rows.Next() {
			var c cred
			var hash []byte
			if err := rows.Scan(&c.entity, &c.id, &hash); err != nil {
				rows.Close()
				return err
			}
			if c.entity == "user" {
				c.rec.Password = credentialDigest(hash)
			} else {
				c.rec.Hash = credentialDigest(hash)
			}
			creds = append(creds, c)
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return err
		}
	}
	now := time.Now()
	for _, c := range creds {
		e := AuditEntry{At: now, Actor: "lotwatch", Action: "state credentials", Entity: c.entity, EntityID: c.id, EntityTo: c.id,
			New: toJSON(c.rec), Reason: "schema upgrade: the audit trail states password and token hashes"}
		var err error
		if head, err = (*DB)(nil).appendAudit(tx, head, &e); err != nil {
			return err
		}
	}
	return nil
}

// upgradeChunk is how many lots upgradePackedLots reads before writing
// them back.
const upgradeChunk = 8192

// upgradePackedLots fills the packed copy (migration 0002) of every lot
// stored before it, and records that in the audit trail: one entry with
// the number of lots and the SHA-256 over their ids and packed copies in
// id order. A database without any audit entry (a new one) gets none.
// The values of the lots are not changed, and `audit verify` checks them
// afterwards against the entries they were written with, so tampering
// from before the upgrade is still found after it.
//
// Migration 0004 drops the packed copy again. The step stays so that a
// file upgraded from schema 1 gets the same audit trail whether it
// passed through schema 2 with an earlier lotwatch or not, and so that a
// file left at schema 2 by an interrupted upgrade is one that an earlier
// lotwatch reads.
func upgradePackedLots(tx *sql.Tx, m migration) error {
	cats := map[int64][]string{}
	rows, err := tx.Query("SELECT id, categories FROM processes")
	if err != nil {
		return err
	}
	for rows.Next() {
		var id int64
		var js string
		if err := rows.Scan(&id, &js); err != nil {
			rows.Close()
			return err
		}
		var cs []string
		if err := json.Unmarshal([]byte(js), &cs); err != nil {
			rows.Close()
			return fmt.Errorf("process %d: categories: %w", id, err)
		}
		cats[id] = cs
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return err
	}
	upd, err := tx.Prepare("UPDATE lots SET packed = ? WHERE id = ?")
	if err != nil {
		return err
	}
	defer upd.Close()
	h := sha256.New()
	var n int
	var last int64
	var buf []byte
	for {
		rows, err := tx.Query("SELECT "+lotCols+" FROM lots WHERE id > ? ORDER BY id LIMIT ?", last, upgradeChunk)
		if err != nil {
			return err
		}
		var chunk []Lot
		for rows.Next() {
			var l Lot
			if err := scanLot(rows, &l, time.UTC); err != nil {
				rows.Close()
				return err
			}
			chunk = append(chunk, l)
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return err
		}
		if len(chunk) == 0 {
			break
		}
		for i := range chunk {
			l := &chunk[i]
			buf = appendPacked(buf[:0], l, cats[l.ProcessID])
			if _, err := upd.Exec(buf, l.ID); err != nil {
				return err
			}
			h.Write(binary.AppendVarint(nil, l.ID))
			h.Write(buf)
			last = l.ID
			n++
		}
	}
	var head chainHead
	if err := tx.QueryRow("SELECT seq, hash FROM audit_head WHERE id = 1").Scan(&head.seq, &head.hash); err != nil {
		return err
	}
	if head.seq == 0 {
		return nil
	}
	e := AuditEntry{At: time.Now(), Actor: "lotwatch", Action: "migrate", Entity: "schema", EntityID: int64(m.version), EntityTo: int64(m.version),
		New:    toJSON(map[string]any{"migration": m.name, "lots_packed": n, "sha256": hex.EncodeToString(h.Sum(nil))}),
		Reason: "schema upgrade: a packed copy of each lot for chart reads"}
	_, err = (*DB)(nil).appendAudit(tx, head, &e)
	return err
}

// packedVersion is the first byte of a packed lot.
const packedVersion = 1

// appendPacked appends the packed form of a lot's stored values, as
// schema 2 kept it beside the columns (migration 0004 dropped it): a
// version byte, the id as a uvarint, time and recorded as 8-byte little-endian nanoseconds,
// varints (encoding/binary) for inspected, count and revision,
// length-prefixed strings for lot, shift,
// inspector, note, recorded_by and reason, and the category counts — each
// a uvarint k (the category's position in the process's list, from 1; 0
// for a name outside it, followed by the name) and a varint count. Known
// categories come first in the process's order, other names after them
// sorted, so the packed form of given values is always the same bytes.
func appendPacked(b []byte, l *Lot, cats []string) []byte {
	b = append(b, packedVersion)
	b = binary.AppendUvarint(b, uint64(l.ID))
	b = binary.LittleEndian.AppendUint64(b, uint64(l.Time.UnixNano()))
	b = binary.LittleEndian.AppendUint64(b, uint64(nanos(l.Recorded)))
	b = binary.AppendVarint(b, l.Inspected)
	b = binary.AppendVarint(b, l.Count)
	b = binary.AppendUvarint(b, uint64(l.Revision))
	for _, s := range [...]string{l.Lot, l.Shift, l.Inspector, l.Note, l.RecordedBy, l.Reason} {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	b = binary.AppendUvarint(b, uint64(len(l.Categories)))
	if len(l.Categories) == 0 {
		return b
	}
	n := 0
	for i, c := range cats {
		if v, ok := l.Categories[c]; ok {
			b = binary.AppendUvarint(b, uint64(i+1))
			b = binary.AppendVarint(b, v)
			n++
		}
	}
	if n == len(l.Categories) {
		return b
	}
	known := make(map[string]bool, len(cats))
	for _, c := range cats {
		known[c] = true
	}
	var other []string
	for c := range l.Categories {
		if !known[c] {
			other = append(other, c)
		}
	}
	sort.Strings(other)
	for _, c := range other {
		b = binary.AppendUvarint(b, 0)
		b = binary.AppendUvarint(b, uint64(len(c)))
		b = append(b, c...)
		b = binary.AppendVarint(b, l.Categories[c])
	}
	return b
}
