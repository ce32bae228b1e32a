package store

import (
	"crypto/sha256"
	"database/sql"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"time"
)

// upgrades are the steps of migrations that SQL alone cannot do; each
// runs after the migration's SQL, in its transaction.
var upgrades = map[int]func(tx *sql.Tx, m migration) error{
	2: upgradePackedLots,
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
