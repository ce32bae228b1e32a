package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"sync/atomic"
	"time"
)

// ErrNotReplica is returned by UseReplica for a database that does not
// hold this plant's audit trail: it is not a replica of the database the
// store writes.
var ErrNotReplica = errors.New("not a replica of the database")

// ErrReplicaNeedsServer is returned by UseReplica on a SQLite store, or
// for a replica that is not a PostgreSQL URL: a SQLite file has no
// streaming replicas.
var ErrReplicaNeedsServer = errors.New("a read replica needs PostgreSQL for both databases")

// replica is a streaming replica of the store's PostgreSQL database that
// answers the reads of a process's lots (see UseReplica).
type replica struct {
	db   *sql.DB
	name string // the URL without its password

	served, lagging, failed atomic.Int64
	// restUntil: after a failure the replica is left alone for a while
	// (replicaRest), so that a replica that is down, or slow to refuse,
	// does not make every chart wait for it.
	restUntil atomic.Int64 // Unix nanoseconds
}

// replicaRest is how long the primary answers alone after the replica
// failed a read.
const replicaRest = 10 * time.Second

// ReplicaReads counts the reads of lots since UseReplica: Replica, those
// the replica answered; Lagging, those the primary answered because the
// replica had not yet replayed the process's latest change; Failed, those
// the primary answered because the replica could not be read.
type ReplicaReads struct {
	Replica, Lagging, Failed int64
}

// UseReplica sends the reads of a process's lots (charts, the board,
// reviews, reports, the API's lot lists) to a streaming replica of the
// store's PostgreSQL database, at url. Call it before the store is
// shared.
//
// A chart is only as good as the lots it is drawn from, so the replica
// answers for a process only when it holds the same change counter of
// that process (LotsVersion, read in the snapshot the lots are then read
// in) as the primary at that moment: then it holds the same lots. When
// the replica is behind, or cannot be read, the primary answers (alone
// for the next 10 s after the replica failed a read). So whatever the
// replica's lag, a read returns what the primary holds.
// (Equal, not at least: a restore may set a counter back, and a replica
// that has not yet replayed the restore must not answer with what the
// restore replaced.)
//
// Everything else (sessions, tokens, users, limit sets, causes, the
// audit trail, the alert outbox) is read from the primary, so that a
// change is seen by the very next request.
func (db *DB) UseReplica(url string) error {
	if db.d != postgresDialect || !IsURL(url) {
		return fmt.Errorf("store: read replica %s: %w", Redact(url), ErrReplicaNeedsServer)
	}
	name, secrets := Redact(url), secretsOf(url)
	cfg, err := pgConfig(url, "lotwatch-read")
	if err != nil {
		return fmt.Errorf("store: read replica %s: %w", name, err)
	}
	cfg.RuntimeParams["default_transaction_read_only"] = "on"
	ctx, cancel := context.WithTimeout(context.Background(), cfg.ConnectTimeout+5*time.Second)
	defer cancel()
	r, err := pgConnect(ctx, cfg, readConns, secrets)
	if err != nil {
		return fmt.Errorf("store: read replica %s: %w", name, err)
	}
	if err := db.sameChain(ctx, r); err != nil {
		r.Close()
		return fmt.Errorf("store: read replica %s: %w", name, scrub(err, secrets))
	}
	db.replica = &replica{db: r, name: name}
	return nil
}

// sameChain checks that r holds this plant's audit trail: the head of
// its chain (where its replay has come to) is an entry of the primary's
// chain. A replica of another database, or a copy that has since gone
// its own way, fails.
func (db *DB) sameChain(ctx context.Context, r *sql.DB) error {
	var head chainHead
	if err := r.QueryRowContext(ctx, qHeadSelect).Scan(&head.seq, &head.hash); err != nil {
		return fmt.Errorf("%w: it holds no lotwatch audit trail (%w)", ErrNotReplica, err)
	}
	if head.seq == 0 {
		return nil // nothing logged yet on the replica: nothing to tell apart
	}
	var hash string
	err := db.r.QueryRowContext(ctx, "SELECT hash FROM audit WHERE seq = ?", head.seq).Scan(&hash)
	if errors.Is(err, sql.ErrNoRows) || (err == nil && hash != head.hash) {
		return fmt.Errorf("%w: its audit entry %d is not this database's", ErrNotReplica, head.seq)
	}
	return err
}

// ReplicaReads returns the counts of lot reads since UseReplica, and
// false when the store has no replica.
func (db *DB) ReplicaReads() (ReplicaReads, bool) {
	rep := db.replica
	if rep == nil {
		return ReplicaReads{}, false
	}
	return ReplicaReads{rep.served.Load(), rep.lagging.Load(), rep.failed.Load()}, true
}

// lotQueryer is what the reads of lots run their queries on: the read
// pool of the primary, or a snapshot of the replica.
type lotQueryer interface {
	QueryContext(ctx context.Context, query string, args ...any) (*sql.Rows, error)
	QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row
}

// readLots runs read, which reads lots of the process on q, on a
// snapshot of the replica when that holds the primary's latest change of
// the process, else on the primary. read may run twice (on the primary
// after the replica failed it), so it must start its result afresh.
func (db *DB) readLots(ctx context.Context, processID int64, read func(q lotQueryer) error) error {
	rep := db.replica
	if rep == nil {
		return read(db.r)
	}
	if time.Now().UnixNano() < rep.restUntil.Load() {
		rep.failed.Add(1)
		return read(db.r)
	}
	want, err := db.LotsVersion(ctx, processID)
	if err != nil {
		return err
	}
	tx, caughtUp, err := rep.snapshot(ctx, processID, want)
	switch {
	case err != nil:
		rep.fail()
		return read(db.r)
	case !caughtUp:
		rep.lagging.Add(1)
		return read(db.r)
	}
	defer tx.Rollback()
	if err := read(tx); err != nil {
		if ctx.Err() != nil {
			return err
		}
		rep.fail()
		return read(db.r)
	}
	rep.served.Add(1)
	return nil
}

// fail counts a read the replica failed and rests it.
func (rep *replica) fail() {
	rep.failed.Add(1)
	rep.restUntil.Store(time.Now().Add(replicaRest).UnixNano())
}

// snapshot begins a read of the replica and reports whether, in it, the
// process's change counter is want (the primary's).
func (rep *replica) snapshot(ctx context.Context, processID int64, want LotsVersion) (*sql.Tx, bool, error) {
	tx, err := rep.db.BeginTx(ctx, &sql.TxOptions{Isolation: sql.LevelRepeatableRead, ReadOnly: true})
	if err != nil {
		return nil, false, err
	}
	var have LotsVersion
	err = tx.QueryRowContext(ctx, "SELECT version, rewrites FROM lot_versions WHERE process_id = ?", processID).Scan(&have.Version, &have.Rewrites)
	if err != nil && !errors.Is(err, sql.ErrNoRows) {
		tx.Rollback()
		return nil, false, err
	}
	if have != want {
		tx.Rollback()
		return nil, false, nil
	}
	return tx, true, nil
}
