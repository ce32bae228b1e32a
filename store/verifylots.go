package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"hash"
	"sort"
	"time"
)

// revRow is one stored revision of a lot (a row of lots or lot_revisions).
type revRow struct {
	revision   int
	in         LotInput
	cats       string // stored form
	voided     bool
	recorded   int64
	recordedBy string
	reason     string
}

// content is the JSON the audit trail holds of a lot after a correction
// or void.
func (r *revRow) content() string { return toJSON(contentOf(r.in, r.voided)) }

// decodeCats fills in.Categories from the stored form, once.
func (r *revRow) decodeCats() error {
	if r.cats == "" || r.in.Categories != nil {
		return nil
	}
	var err error
	r.in.Categories, err = decodeCategories(r.cats)
	return err
}

// lotCheck walks the stored lots in id order against the batch entries
// that added them (sorted by first id), and each lot's revisions against
// the corrections and voids of the trail.
type lotCheck struct {
	d       *dataTrail
	ctx     context.Context
	tx      *sql.Tx
	procs   map[int64]procInfo
	revs    map[int64][]revRow // earlier revisions by lot id; checked ones are removed
	batches []lotBatch
	bi      int       // the batch being walked, or the next one
	open    bool      // batches[bi] has lots walked
	next    int64     // the id its next lot must have
	n       int       // its lots walked
	h       hash.Hash // over their lines
	line    []byte
	firsts  []revRow // their first revisions, for naming (small batches only)
}

func (d *dataTrail) checkLots(ctx context.Context, tx *sql.Tx, procs map[int64]procInfo) (*rowBreak, error) {
	revs, err := readRevisions(ctx, tx)
	if err != nil {
		return nil, err
	}
	c := &lotCheck{d: d, ctx: ctx, tx: tx, procs: procs, revs: revs, batches: d.batches, h: sha256.New()}
	sort.SliceStable(c.batches, func(i, j int) bool { return c.batches[i].first < c.batches[j].first })
	for i := 1; i < len(c.batches); i++ {
		if a, b := c.batches[i-1], c.batches[i]; b.first <= a.last {
			return &rowBreak{b.seq, fmt.Sprintf("lot %d", b.first), fmt.Sprintf("is claimed by entries %d and %d of the audit trail", a.seq, b.seq)}, nil
		}
	}
	rows, err := tx.QueryContext(ctx, `SELECT id, process_id, lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by, reason
		FROM lots ORDER BY id`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	for rows.Next() {
		var id, pid, t int64
		var cur revRow
		if err := rows.Scan(&id, &pid, &cur.in.Lot, &t, &cur.in.Shift, &cur.in.Inspected, &cur.in.Count, &cur.cats, &cur.in.Inspector, &cur.in.Note,
			&cur.revision, &cur.voided, &cur.recorded, &cur.recordedBy, &cur.reason); err != nil {
			return nil, err
		}
		cur.in.Time = time.Unix(0, t).UTC()
		if rb, err := c.lot(id, pid, cur); rb != nil || err != nil {
			return rb, err
		}
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return c.finish()
}

// readRevisions reads the earlier revisions of every lot (few: one per
// correction or void).
func readRevisions(ctx context.Context, tx *sql.Tx) (map[int64][]revRow, error) {
	revs := map[int64][]revRow{}
	rows, err := tx.QueryContext(ctx, `SELECT lot_id, revision, lot, time, shift, inspected, count, categories, inspector, note, voided, recorded, recorded_by, reason
		FROM lot_revisions ORDER BY lot_id, revision`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	for rows.Next() {
		var id, t int64
		var r revRow
		if err := rows.Scan(&id, &r.revision, &r.in.Lot, &t, &r.in.Shift, &r.in.Inspected, &r.in.Count, &r.cats, &r.in.Inspector, &r.in.Note,
			&r.voided, &r.recorded, &r.recordedBy, &r.reason); err != nil {
			return nil, err
		}
		r.in.Time = time.Unix(0, t).UTC()
		if r.decodeCats() != nil {
			r.in.Categories = map[string]int64{"\x00unreadable": 0}
		}
		revs[id] = append(revs[id], r)
	}
	return revs, rows.Err()
}

func (c *lotCheck) name(id, pid int64, code string) string {
	if code == "" {
		return fmt.Sprintf("lot %d (process %q)", id, c.procs[pid].name)
	}
	return fmt.Sprintf("lot %d (process %q, lot code %s)", id, c.procs[pid].name, code)
}

// lot checks one stored lot: it must be the next lot of the batch that
// holds its id, and its revisions must follow the trail.
func (c *lotCheck) lot(id, pid int64, cur revRow) (*rowBreak, error) {
	name := c.name(id, pid, cur.in.Lot)
	for c.open && c.batches[c.bi].last < id {
		if rb, err := c.closeBatch(); rb != nil || err != nil {
			return rb, err
		}
		c.bi++
	}
	if !c.open {
		if c.bi < len(c.batches) && c.batches[c.bi].last < id { // a batch none of whose lots is stored
			b := c.batches[c.bi]
			return removed(b.seq, c.name(b.first, b.pid, "")), nil
		}
		if c.bi >= len(c.batches) || id < c.batches[c.bi].first {
			return unrecorded(name), nil
		}
		c.open, c.next, c.n, c.firsts = true, c.batches[c.bi].first, 0, c.firsts[:0]
		c.h.Reset()
	}
	b := &c.batches[c.bi]
	if id != c.next {
		return removed(b.seq, c.name(c.next, b.pid, "")), nil
	}
	c.next++
	c.n++
	if pid != b.pid || cur.decodeCats() != nil {
		return differ(b.seq, name), nil
	}
	first, rb := c.revisions(id, name, b, cur)
	if rb != nil {
		return rb, nil
	}
	c.line = appendLotLine(c.line[:0], &first.in, first.cats)
	c.h.Write(c.line)
	if b.count <= maxListed {
		first.decodeCats()
		c.firsts = append(c.firsts, first)
	}
	return nil, nil
}

// revisions checks a lot's revisions: the first is what its batch added
// (as the batch's time, actor and no reason), each later one what a
// correction or void made it. It returns the first revision.
func (c *lotCheck) revisions(id int64, name string, b *lotBatch, cur revRow) (revRow, *rowBreak) {
	edits := c.d.edits[id]
	rs := c.revs[id]
	delete(c.revs, id)
	if len(rs) != len(edits) || cur.revision != len(edits)+1 {
		seq := b.seq
		if len(edits) > 0 {
			seq = edits[len(edits)-1].seq
		}
		return revRow{}, &rowBreak{seq, name, "its revisions differ from the audit trail"}
	}
	chain := append(rs, cur)
	first := chain[0]
	if first.revision != 1 || first.voided || first.recorded != b.at || first.recordedBy != b.actor || first.reason != "" {
		return revRow{}, differ(b.seq, name)
	}
	for i, e := range edits {
		r := &chain[i+1]
		if r.revision != i+2 {
			return revRow{}, &rowBreak{e.seq, name, "its revisions differ from the audit trail"}
		}
		r.decodeCats()
		if r.content() != e.next || r.recorded != e.at || r.recordedBy != e.actor || r.reason != e.reason {
			return revRow{}, differ(e.seq, name)
		}
	}
	return first, nil
}

// closeBatch checks that the walked batch had all its lots and that
// their lines give the digest its entry states.
func (c *lotCheck) closeBatch() (*rowBreak, error) {
	b := &c.batches[c.bi]
	c.open = false
	if c.n != b.count || c.next-1 != b.last {
		return removed(b.seq, c.name(c.next, b.pid, "")), nil
	}
	if hex.EncodeToString(c.h.Sum(nil)) == b.sha {
		return nil, nil
	}
	return c.nameChanged(b)
}

// nameChanged names the lot of a batch whose digest fails, where the
// entry lists the lots' content; else the whole batch.
func (c *lotCheck) nameChanged(b *lotBatch) (*rowBreak, error) {
	var raw string
	if err := c.d.side.QueryRowContext(c.ctx, "SELECT new FROM audit WHERE seq = ?", b.seq).Scan(&raw); err != nil {
		return nil, err
	}
	var e struct {
		Lots []json.RawMessage `json:"lots"`
	}
	json.Unmarshal([]byte(raw), &e)
	given := map[string]string{}
	for _, l := range e.Lots {
		var lc lotContent
		if json.Unmarshal(l, &lc) == nil {
			given[lc.Lot] = string(l)
		}
	}
	for i := range c.firsts {
		f := &c.firsts[i]
		if g, ok := given[f.in.Lot]; len(given) > 0 && (!ok || g != toJSON(contentOf(f.in, false))) {
			return differ(b.seq, c.name(b.first+int64(i), b.pid, f.in.Lot)), nil
		}
	}
	return &rowBreak{b.seq, fmt.Sprintf("lots %d–%d (process %q)", b.first, b.last, c.procs[b.pid].name), "stored values differ from the audit trail"}, nil
}

// finish closes the last batch and names what the trail has that is not
// stored: a batch, revisions without their lot, an edit of a lot no batch
// added.
func (c *lotCheck) finish() (*rowBreak, error) {
	if c.open {
		if rb, err := c.closeBatch(); rb != nil || err != nil {
			return rb, err
		}
		c.bi++
	}
	if c.bi < len(c.batches) {
		b := c.batches[c.bi]
		return removed(b.seq, c.name(b.first, b.pid, "")), nil
	}
	for id, rs := range c.revs {
		return &rowBreak{0, fmt.Sprintf("lot %d", id), fmt.Sprintf("has %d earlier revisions stored but no current row", len(rs))}, nil
	}
	for id, es := range c.d.edits {
		k := sort.Search(len(c.batches), func(i int) bool { return c.batches[i].last >= id })
		if k >= len(c.batches) || c.batches[k].first > id {
			return removed(es[len(es)-1].seq, fmt.Sprintf("lot %d", id)), nil
		}
	}
	return nil, nil
}
