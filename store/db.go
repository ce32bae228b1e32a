package store

import (
	"context"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"net/url"
	"os"
	"sort"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/mattn/go-sqlite3"
)

//go:embed migrations/*.sql migrations/postgres/*.sql
var migrationFS embed.FS

// dialect is what differs between the two databases a store can live in,
// kept in one place: the migrations (each database has its own, numbered
// and recorded in schema_migrations), and the few statements whose SQL is
// not the same. Every other query is written once, with ? placeholders
// (numbered for PostgreSQL by rebind).
type dialect struct {
	name       string // "sqlite" or "postgres"
	migrations string // folder of the embedded migrations
	// headSelect reads the audit chain head at the start of each writer
	// transaction. SQLite's BEGIN IMMEDIATE already holds the file's write
	// lock; on PostgreSQL the row lock makes the writers of several
	// servers take turns, as SQLite's one writer does: each appends to
	// the chain after the last, a process's lot ids follow the commits
	// (the chart cache reads the lots above the highest id it holds; an
	// audit entry names its lots by an id range), and no two writers
	// wait for each other's rows.
	headSelect string
	// lotsRead names the lots table for reading a process's lots in time
	// order: SQLite is told to use its covering index.
	lotsRead string
	// greatest is the function of the larger of two values.
	greatest string
	// claimRows ends the subquery that picks the outbox rows a claim
	// takes: on PostgreSQL it locks them and skips those another
	// server's claim holds, so that two claims at once never take the
	// same row (SQLite's writer holds the whole file).
	claimRows string
	// snapshot is the isolation of a read transaction that sees one
	// state of the whole database (SQLite's read transactions always do).
	snapshot sql.IsolationLevel
	// tables lists the tables of the database (Copy refuses unknown ones).
	tables string
	// afterCopy, with TABLE replaced by a table's name, makes the ids
	// handed out after a copy follow the copied ones ("" when the
	// database does that by itself).
	afterCopy string
	// size reads the bytes the database takes on the server, its
	// tables with their indexes and long values ("" where the database
	// is a file, whose size the file system tells).
	size string
}

var (
	sqliteDialect = &dialect{name: "sqlite", migrations: "migrations",
		headSelect: qHeadSelect, lotsRead: "lots INDEXED BY lots_read", greatest: "max",
		tables: "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'"}
	postgresDialect = &dialect{name: "postgres", migrations: "migrations/postgres",
		headSelect: qHeadSelect + " FOR UPDATE", lotsRead: "lots", greatest: "GREATEST",
		snapshot:  sql.LevelRepeatableRead,
		claimRows: " FOR UPDATE SKIP LOCKED",
		tables:    "SELECT table_name FROM information_schema.tables WHERE table_schema = current_schema()",
		afterCopy: `SELECT setval(pg_get_serial_sequence('TABLE', 'id'), (SELECT COALESCE(MAX(id), 0) + 1 FROM TABLE), false)`,
		size: `SELECT COALESCE(SUM(pg_total_relation_size(c.oid)), 0) FROM pg_class c
			JOIN pg_namespace n ON n.oid = c.relnamespace
			WHERE n.nspname = current_schema() AND c.relkind = 'r'`}
)

// migration is one forward-only schema step, numbered from 1.
type migration struct {
	version int
	name    string
	sql     string
}

func migrations() ([]migration, error) { return migrationsOf(sqliteDialect) }

func migrationsOf(d *dialect) ([]migration, error) {
	names, err := fs.Glob(migrationFS, d.migrations+"/*.sql")
	if err != nil {
		return nil, err
	}
	sort.Strings(names)
	var ms []migration
	for i, n := range names {
		base := strings.TrimPrefix(n, d.migrations+"/")
		v, err := strconv.Atoi(strings.SplitN(base, "_", 2)[0])
		if err != nil || v != i+1 {
			return nil, fmt.Errorf("store: migration %s is out of sequence", base)
		}
		b, err := migrationFS.ReadFile(n)
		if err != nil {
			return nil, err
		}
		ms = append(ms, migration{version: v, name: base, sql: string(b)})
	}
	return ms, nil
}

// SchemaVersion is the schema version this build writes in a SQLite file.
func SchemaVersion() int {
	ms, _ := migrations()
	return len(ms)
}

// DB is a lotwatch database in one SQLite file.
//
// Connections: one writer connection (BEGIN IMMEDIATE) owned by a single
// writer goroutine, and a pool of read-only connections. Readers never
// wait for the writer (WAL), and writers never meet each other in SQLite,
// so no user sees "database is locked". The writer batches the work
// submitted concurrently into one transaction (group commit), each piece
// in its own savepoint, and answers each caller only after COMMIT; with
// synchronous=FULL an acknowledged write survives a power cut.
type DB struct {
	path string   // the file, or the URL without its password
	d    *dialect // what differs between SQLite and PostgreSQL
	w    *sql.DB  // exactly one connection
	r    *sql.DB  // read-only pool
	lock *dbLock  // shared, while open (see lockShared)

	replica *replica // answers the reads of lots, when set (see UseReplica)

	readOnly bool        // see ReadOnly: w is nil
	mem      memSessions // the sessions of a read-only database

	jobs      chan *job
	quit      chan struct{}
	done      chan struct{}
	closeOnce sync.Once
	mu        sync.RWMutex // held shared while queueing a job, exclusive to close
	closed    bool

	// commitHook, when set, is told of each committed transaction.
	commitHook atomic.Pointer[func(time.Duration, int)]

	// hot holds the writer's most frequent statements, prepared once on
	// its connection (preparing costs about as much as running them).
	hot map[string]*sql.Stmt
}

// Statements the writer runs for nearly every job.
const (
	qSavepoint = "SAVEPOINT job"
	qRelease   = "RELEASE job"
	// qNextSavepoint has no arguments: PostgreSQL takes both statements
	// in one message (the simple query protocol).
	qNextSavepoint = "RELEASE job; SAVEPOINT job"
	qHeadSelect    = "SELECT seq, hash FROM audit_head WHERE id = 1"
	qHeadUpdate    = "UPDATE audit_head SET seq = ?, hash = ? WHERE id = 1"
	qAuditInsert   = `INSERT INTO audit (seq, at, actor, action, entity, entity_id, entity_to, old, new, reason, prev_hash, hash)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`
	qBumpVersion = `INSERT INTO lot_versions (process_id, version, rewrites) VALUES (?, ?, ?)
		ON CONFLICT (process_id) DO UPDATE SET version = lot_versions.version + excluded.version, rewrites = lot_versions.rewrites + excluded.rewrites`
	qLotInsert = `INSERT INTO lots (process_id, lot, time, shift, inspected, count, categories, inspector, note, revision, voided, recorded, recorded_by)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, 1, 0, ?, ?) ON CONFLICT (process_id, lot) DO NOTHING RETURNING id`
	qLotByCode   = "SELECT " + lotCols + " FROM lots WHERE process_id = ? AND lot = ?"
	qProcessByID = "SELECT " + processCols + " FROM processes WHERE id = ?"
)

var hotQueries = []string{qSavepoint, qRelease, qHeadUpdate, qAuditInsert, qBumpVersion, qLotInsert, qLotByCode, qProcessByID}

func (db *DB) prepareHot() error {
	db.hot = map[string]*sql.Stmt{}
	for _, q := range append([]string{db.d.headSelect}, hotQueries...) {
		st, err := db.w.Prepare(q)
		if err != nil {
			return fmt.Errorf("store: prepare %q: %w", q, err)
		}
		db.hot[q] = st
	}
	return nil
}

// stmt returns the hot statement q for use in tx, or nil when there is
// none (then the caller runs q itself).
func (db *DB) stmt(tx *sql.Tx, q string) *sql.Stmt {
	if db == nil || db.hot[q] == nil {
		return nil
	}
	return tx.Stmt(db.hot[q])
}

// execIn runs q in tx, through its prepared statement when it is hot.
func (db *DB) execIn(tx *sql.Tx, q string, args ...any) (sql.Result, error) {
	if st := db.stmt(tx, q); st != nil {
		return st.Exec(args...)
	}
	return tx.Exec(q, args...)
}

// queryRowIn is execIn for a query of one row.
func (db *DB) queryRowIn(tx *sql.Tx, q string, args ...any) *sql.Row {
	if st := db.stmt(tx, q); st != nil {
		return st.QueryRow(args...)
	}
	return tx.QueryRow(q, args...)
}

func dsn(path string, params string) string {
	// Escape what a SQLite URI would read as syntax.
	p := strings.NewReplacer("%", "%25", "?", "%3f", "#", "%23").Replace(path)
	return "file:" + p + "?" + params
}

// Open opens (creating if needed) the database at path and applies the
// embedded migrations it lacks. A database written by a newer lotwatch is
// refused with ErrNewerSchema. A postgres:// or postgresql:// URL opens
// that PostgreSQL database instead (see IsURL); its errors never hold the
// password, and wrap ErrBadURL or ErrUnreachable where they apply.
func Open(path string) (*DB, error) {
	if IsURL(path) {
		return openPostgres(path)
	}
	lock, err := lockShared(path)
	if err != nil {
		return nil, err
	}
	db, err := open(path)
	if err != nil {
		lock.release()
		return nil, err
	}
	db.lock = lock
	return db, nil
}

func open(path string) (*DB, error) {
	if _, err := os.Stat(path); err == nil && !writable(path) {
		return openReadOnly(path)
	}
	if err := createPrivate(path); err != nil {
		return nil, err
	}
	wparams := url.Values{}
	wparams.Set("_journal_mode", "WAL")
	wparams.Set("_synchronous", "FULL")
	wparams.Set("_busy_timeout", "10000")
	wparams.Set("_foreign_keys", "on")
	wparams.Set("_txlock", "immediate")
	w, err := sql.Open("sqlite3", dsn(path, wparams.Encode()))
	if err != nil {
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	w.SetMaxOpenConns(1)
	w.SetMaxIdleConns(1)
	w.SetConnMaxLifetime(0)
	w.SetConnMaxIdleTime(0)
	if _, err := w.Exec("PRAGMA cache_size = -65536; PRAGMA temp_store = MEMORY"); err != nil {
		w.Close()
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	if err := migrateWith(w, path, sqliteDialect); err != nil {
		w.Close()
		return nil, err
	}
	rparams := url.Values{}
	rparams.Set("mode", "ro")
	rparams.Set("_busy_timeout", "10000")
	rparams.Set("_foreign_keys", "on")
	rparams.Set("_query_only", "1")
	rparams.Set("_cache_size", "-16384") // KiB: 16 MiB per reader
	r, err := sql.Open("sqlite3", dsn(path, rparams.Encode()))
	if err != nil {
		w.Close()
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}
	r.SetMaxOpenConns(8)
	r.SetMaxIdleConns(8)
	db := &DB{path: path, d: sqliteDialect, w: w, r: r, jobs: make(chan *job, 256), quit: make(chan struct{}), done: make(chan struct{})}
	if err := checkChain(context.Background(), db.w); err != nil {
		db.w.Close()
		db.r.Close()
		return nil, err
	}
	if err := db.prepareHot(); err != nil {
		db.w.Close()
		db.r.Close()
		return nil, err
	}
	go db.writer()
	return db, nil
}

func migrateWith(w *sql.DB, path string, d *dialect) error {
	ms, err := migrationsOf(d)
	if err != nil {
		return err
	}
	if _, err := w.Exec(`CREATE TABLE IF NOT EXISTS schema_migrations (
		version INTEGER PRIMARY KEY, name TEXT NOT NULL, applied BIGINT NOT NULL)`); err != nil {
		return fmt.Errorf("store: %s: %w", path, err)
	}
	var have int
	if err := w.QueryRow("SELECT COALESCE(MAX(version), 0) FROM schema_migrations").Scan(&have); err != nil {
		return fmt.Errorf("store: %s: %w", path, err)
	}
	if have > len(ms) {
		return fmt.Errorf("store: %s has schema version %d but this lotwatch knows only up to %d; use a newer lotwatch: %w", path, have, len(ms), ErrNewerSchema)
	}
	for _, m := range ms[have:] {
		tx, err := w.Begin()
		if err != nil {
			return fmt.Errorf("store: %s: migration %s: %w", path, m.name, err)
		}
		if _, err := tx.Exec(m.sql); err != nil {
			tx.Rollback()
			return fmt.Errorf("store: %s: migration %s: %w", path, m.name, err)
		}
		if up := upgrades[m.version]; up != nil && d == sqliteDialect {
			if err := up(tx, m); err != nil {
				tx.Rollback()
				return fmt.Errorf("store: %s: migration %s: %w", path, m.name, err)
			}
		}
		if _, err := tx.Exec("INSERT INTO schema_migrations (version, name, applied) VALUES (?, ?, ?)", m.version, m.name, time.Now().UnixNano()); err != nil {
			tx.Rollback()
			return fmt.Errorf("store: %s: migration %s: %w", path, m.name, err)
		}
		if d == sqliteDialect {
			if _, err := tx.Exec(fmt.Sprintf("PRAGMA user_version = %d", m.version)); err != nil {
				tx.Rollback()
				return fmt.Errorf("store: %s: migration %s: %w", path, m.name, err)
			}
		}
		if err := tx.Commit(); err != nil {
			return fmt.Errorf("store: %s: migration %s: %w", path, m.name, err)
		}
	}
	return nil
}

// Path is the database file.
func (db *DB) Path() string { return db.path }

// Close waits for queued writes, then closes the connections.
func (db *DB) Close() error {
	var err error
	db.closeOnce.Do(func() {
		db.mu.Lock()
		db.closed = true
		db.mu.Unlock()
		close(db.quit)
		<-db.done
		for _, st := range db.hot {
			st.Close()
		}
		err = db.r.Close()
		if db.replica != nil {
			err = errors.Join(err, db.replica.db.Close())
		}
		if db.w != nil {
			err = errors.Join(err, db.w.Close())
		}
		db.lock.release()
	})
	return err
}

// job is one unit of work for the writer: fn runs inside the batch's
// transaction, in its own savepoint.
type job struct {
	fn  func(*wtx) error
	err chan error
}

// wtx is the writer transaction handed to a job.
type wtx struct {
	*sql.Tx
	db  *DB
	now time.Time

	// The audit chain's head when the batch began, and what the jobs
	// leave for its end (see settle).
	head    chainHead
	entries []AuditEntry
	bumps   []versionBump
	added   []lotRange
	// procs holds the processes read by activeProcess in this batch.
	procs map[int64]Process
}

const maxBatch = 128

func (db *DB) writer() {
	defer close(db.done)
	for {
		var first *job
		select {
		case first = <-db.jobs:
		case <-db.quit:
			// Drain what was queued before Close.
			for {
				select {
				case j := <-db.jobs:
					db.runBatch([]*job{j})
				default:
					return
				}
			}
		}
		batch := []*job{first}
	fill:
		for len(batch) < maxBatch {
			select {
			case j := <-db.jobs:
				batch = append(batch, j)
			default:
				break fill
			}
		}
		db.runBatch(batch)
	}
}

// OnCommit makes f be told, after each committed transaction of the
// writer, how long it took from BEGIN to COMMIT and how many writes it
// carried (group commit): a hook for the server's monitoring, which the
// store does not do itself. f must return quickly.
func (db *DB) OnCommit(f func(d time.Duration, writes int)) { db.commitHook.Store(&f) }

func (db *DB) runBatch(batch []*job) {
	start := time.Now()
	errs, err := db.commitBatch(batch)
	if err != nil {
		for _, j := range batch {
			j.err <- err
		}
		return
	}
	if h := db.commitHook.Load(); h != nil {
		(*h)(time.Since(start), len(batch))
	}
	for i, j := range batch {
		j.err <- errs[i]
	}
}

// commitBatch runs the batch in one transaction and commits it, returning
// the error of each job.
func (db *DB) commitBatch(batch []*job) ([]error, error) {
	tx, err := db.w.Begin()
	if err != nil {
		return nil, fmt.Errorf("store: begin: %w", err)
	}
	w := &wtx{Tx: tx, db: db, now: time.Now()}
	errs := make([]error, len(batch))
	if err := w.run(batch, errs); err != nil {
		tx.Rollback()
		return nil, err
	}
	if err := tx.Commit(); err != nil {
		return nil, fmt.Errorf("store: commit: %w", err)
	}
	return errs, nil
}

// run takes the chain head, runs the jobs and settles the batch.
func (w *wtx) run(batch []*job, errs []error) error {
	// Another program (a command-line import while the server runs,
	// another server on the same PostgreSQL database) may have written
	// since: take the chain head as the database has it now, under this
	// transaction's write lock.
	if err := w.db.queryRowIn(w.Tx, w.db.d.headSelect).Scan(&w.head.seq, &w.head.hash); err != nil {
		return fmt.Errorf("store: audit head: %w", err)
	}
	if err := w.runJobs(batch, errs); err != nil {
		return err
	}
	return w.settle()
}

// runJobs runs each job of the batch in its own savepoint, so that a job
// that fails leaves the others' work in place; its error goes to errs.
// Between two jobs one statement ends a savepoint and begins the next: a
// round trip fewer on PostgreSQL.
func (w *wtx) runJobs(batch []*job, errs []error) error {
	if _, err := w.db.execIn(w.Tx, qSavepoint); err != nil {
		return fmt.Errorf("store: savepoint: %w", err)
	}
	for i, j := range batch {
		if i > 0 {
			if _, err := w.Exec(qNextSavepoint); err != nil {
				return fmt.Errorf("store: savepoint: %w", err)
			}
		}
		entries, bumps, added := len(w.entries), len(w.bumps), len(w.added)
		if errs[i] = j.fn(w); errs[i] != nil {
			w.entries, w.bumps, w.added = w.entries[:entries], w.bumps[:bumps], w.added[:added]
			if _, err := w.Exec("ROLLBACK TO job"); err != nil {
				return fmt.Errorf("store: rollback to savepoint: %w", err)
			}
		}
	}
	if _, err := w.db.execIn(w.Tx, qRelease); err != nil {
		return fmt.Errorf("store: release savepoint: %w", err)
	}
	return nil
}

// write runs fn in the writer transaction and returns once it is committed
// (or failed). A write once queued is carried out even if ctx ends, so
// the caller waits for its outcome.
func (db *DB) write(ctx context.Context, fn func(*wtx) error) error {
	j := &job{fn: fn, err: make(chan error, 1)}
	if db.readOnly {
		return fmt.Errorf("store: %s: %w", db.path, ErrReadOnly)
	}
	db.mu.RLock()
	if db.closed {
		db.mu.RUnlock()
		return ErrClosed
	}
	select {
	case db.jobs <- j:
	case <-ctx.Done():
		db.mu.RUnlock()
		return ctx.Err()
	}
	db.mu.RUnlock()
	err := <-j.err
	if err != nil && db.d == postgresDialect {
		err = tagUnavailable(err) // e.g. a commit cut off by the server's stop
	}
	return err
}

// isUnique reports a UNIQUE constraint failure.
func isUnique(err error) bool {
	if pgCode(err) == "23505" {
		return true
	}
	var se sqlite3.Error
	return errors.As(err, &se) && se.ExtendedCode == sqlite3.ErrConstraintUnique
}

func nanos(t time.Time) int64 {
	if t.IsZero() {
		return 0
	}
	return t.UnixNano()
}

func fromNanos(n int64, loc *time.Location) time.Time {
	if n == 0 {
		return time.Time{}
	}
	if loc == nil {
		loc = time.UTC
	}
	return time.Unix(0, n).In(loc)
}
