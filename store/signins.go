package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"
)

// signinTables hold the counts of failed sign-ins: kept while they count,
// never copied, no part of the audit trail.
var signinTables = []string{"signin_failures", "signin_blocks"}

// AttemptLimit is how the failed sign-ins against one key (a user name
// and client address, or an address) are limited: after Max failures
// within Window the key is blocked, for Window the first time and twice
// as long each time it is blocked again (up to MaxBlock); a quiet spell
// of Forget clears its record.
type AttemptLimit struct {
	Key      string
	Max      int
	Window   time.Duration
	MaxBlock time.Duration
	Forget   time.Duration
}

// RecordSignInFailure counts a failed sign-in at now against every key of
// limits and reports how long the longest block among them now lasts (0
// if none is blocked). The count is kept in the database, so that every
// server on it holds a client to the same limits; it is no part of the
// audit trail. Where the database cannot be written (read-only, a full
// disk, a lost connection) the failure is counted in memory instead, as
// sessions are, and the wait is still reported; the error, if any, is
// returned with it for the log.
func (db *DB) RecordSignInFailure(ctx context.Context, now time.Time, limits ...AttemptLimit) (time.Duration, error) {
	n := now.UnixNano()
	if db.readOnly {
		return db.mem.attempts.fail(n, limits), nil
	}
	var until int64
	err := db.write(ctx, func(w *wtx) error {
		until = 0
		if err := sweepSignins(w, n); err != nil {
			return err
		}
		for _, l := range limits {
			b, err := failIn(w, n, l)
			if err != nil {
				return err
			}
			until = max(until, b)
		}
		return nil
	})
	if err != nil {
		return db.mem.attempts.fail(n, limits), fmt.Errorf("store: record a failed sign-in (counted in memory): %w", err)
	}
	return max(waitFrom(until, n), db.mem.attempts.wait(n, keysOf(limits))), nil
}

// SignInWait reports how long the longest block among keys still lasts at
// now; 0 lets the sign-in go ahead. Failures counted in memory (see
// RecordSignInFailure) count too; if the database cannot be read, they
// alone are reported, with the error.
func (db *DB) SignInWait(ctx context.Context, now time.Time, keys ...string) (time.Duration, error) {
	n := now.UnixNano()
	mem := db.mem.attempts.wait(n, keys)
	if db.readOnly || len(keys) == 0 {
		return mem, nil
	}
	args := make([]any, len(keys))
	for i, k := range keys {
		args[i] = secretHash(k)
	}
	var until int64
	q := "SELECT COALESCE(MAX(blocked_until), 0) FROM signin_blocks WHERE key_hash IN (?" + strings.Repeat(", ?", len(keys)-1) + ")"
	if err := db.r.QueryRowContext(ctx, q, args...).Scan(&until); err != nil {
		return mem, fmt.Errorf("store: sign-in wait: %w", err)
	}
	return max(waitFrom(until, n), mem), nil
}

// ClearSignInFailures forgets the failures and blocks of key (after a
// successful sign-in under its user name). A key with no record costs no
// write.
func (db *DB) ClearSignInFailures(ctx context.Context, now time.Time, key string) error {
	db.mem.attempts.clear(key)
	if db.readOnly {
		return nil
	}
	h := secretHash(key)
	var one int
	err := db.r.QueryRowContext(ctx, "SELECT 1 FROM signin_blocks WHERE key_hash = ?", h).Scan(&one)
	if errors.Is(err, sql.ErrNoRows) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("store: clear failed sign-ins: %w", err)
	}
	err = db.write(ctx, func(w *wtx) error {
		if err := sweepSignins(w, now.UnixNano()); err != nil {
			return err
		}
		if _, err := w.Exec("DELETE FROM signin_failures WHERE key_hash = ?", h); err != nil {
			return err
		}
		_, err := w.Exec("DELETE FROM signin_blocks WHERE key_hash = ?", h)
		return err
	})
	if err != nil {
		return fmt.Errorf("store: clear failed sign-ins: %w", err)
	}
	return nil
}

// sweepSignins removes what no longer counts, so that the tables stay as
// small as the failures of the last hour. Two servers counting one key
// never both read the old count: writers take turns (dialect.headSelect).
func sweepSignins(w *wtx, now int64) error {
	if _, err := w.Exec("DELETE FROM signin_failures WHERE expires <= ?", now); err != nil {
		return fmt.Errorf("sign-in failures: sweep: %w", err)
	}
	if _, err := w.Exec("DELETE FROM signin_blocks WHERE forget < ? AND blocked_until <= ?", now, now); err != nil {
		return fmt.Errorf("sign-in failures: sweep: %w", err)
	}
	return nil
}

// failIn counts a failure against l.Key in the writer transaction and
// returns until when the key is blocked.
func failIn(w *wtx, now int64, l AttemptLimit) (int64, error) {
	h := secretHash(l.Key)
	var a attemptRecord
	err := w.QueryRow("SELECT blocked_until, strikes, forget FROM signin_blocks WHERE key_hash = ?", h).Scan(&a.blocked, &a.strikes, &a.forget)
	if err != nil && !errors.Is(err, sql.ErrNoRows) {
		return 0, fmt.Errorf("sign-in failures: %w", err)
	}
	rows, err := w.Query("SELECT at FROM signin_failures WHERE key_hash = ? AND expires > ? ORDER BY at", h, now)
	if err != nil {
		return 0, fmt.Errorf("sign-in failures: %w", err)
	}
	for rows.Next() {
		var at int64
		if err := rows.Scan(&at); err != nil {
			rows.Close()
			return 0, fmt.Errorf("sign-in failures: %w", err)
		}
		a.fails = append(a.fails, at)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return 0, fmt.Errorf("sign-in failures: %w", err)
	}
	a.fail(now, l)
	// The key's failures are written anew: at most Max rows.
	if _, err := w.Exec("DELETE FROM signin_failures WHERE key_hash = ?", h); err != nil {
		return 0, fmt.Errorf("sign-in failures: %w", err)
	}
	if len(a.fails) > 0 {
		args := make([]any, 0, 3*len(a.fails))
		for _, at := range a.fails {
			args = append(args, h, at, at+int64(l.Window))
		}
		q := "INSERT INTO signin_failures (key_hash, at, expires) VALUES (?, ?, ?)" + strings.Repeat(", (?, ?, ?)", len(a.fails)-1)
		if _, err := w.Exec(q, args...); err != nil {
			return 0, fmt.Errorf("sign-in failures: %w", err)
		}
	}
	_, err = w.Exec(`INSERT INTO signin_blocks (key_hash, blocked_until, strikes, forget) VALUES (?, ?, ?, ?)
		ON CONFLICT (key_hash) DO UPDATE SET blocked_until = excluded.blocked_until, strikes = excluded.strikes, forget = excluded.forget`,
		h, a.blocked, a.strikes, a.forget)
	if err != nil {
		return 0, fmt.Errorf("sign-in failures: %w", err)
	}
	return a.blocked, nil
}

// attemptRecord is what is kept of one key's failed sign-ins, in the
// database or in memory; times are nanoseconds since 1970 UTC.
type attemptRecord struct {
	fails   []int64 // failures within the window, oldest first
	blocked int64   // refused until this instant
	strikes int     // times the key was blocked
	forget  int64   // a record still quiet at this instant is forgotten
}

// fail counts a failure at now under l. Both the database and memory go
// through it, so that they block alike.
func (a *attemptRecord) fail(now int64, l AttemptLimit) {
	if now > a.forget {
		*a = attemptRecord{}
	}
	a.forget = now + int64(l.Forget)
	cut := 0
	for cut < len(a.fails) && now-a.fails[cut] >= int64(l.Window) {
		cut++
	}
	a.fails = append(a.fails[cut:], now)
	if len(a.fails) < l.Max {
		return
	}
	block := l.Window << a.strikes
	if block > l.MaxBlock || block <= 0 {
		block = l.MaxBlock
	}
	a.strikes++
	a.blocked = now + int64(block)
	a.fails = a.fails[:0]
}

// waitFrom is the wait at now for a block until until.
func waitFrom(until, now int64) time.Duration {
	if now < until {
		return time.Duration(until - now)
	}
	return 0
}

func keysOf(limits []AttemptLimit) []string {
	keys := make([]string, len(limits))
	for i, l := range limits {
		keys[i] = l.Key
	}
	return keys
}

// memAttempts are the failed sign-ins counted in memory: those of a
// read-only database, and those the database could not take.
type memAttempts struct {
	mu    sync.Mutex
	keys  map[string]*attemptRecord // by the key's hash
	swept int64
}

// sweepEvery is how often the records in memory are swept.
const sweepEvery = int64(time.Minute)

func (m *memAttempts) fail(now int64, limits []AttemptLimit) time.Duration {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.keys == nil {
		m.keys = map[string]*attemptRecord{}
	}
	if now-m.swept >= sweepEvery {
		m.swept = now
		for k, a := range m.keys {
			if now > a.forget && now >= a.blocked {
				delete(m.keys, k)
			}
		}
	}
	var w time.Duration
	for _, l := range limits {
		h := string(secretHash(l.Key))
		a := m.keys[h]
		if a == nil {
			a = &attemptRecord{}
			m.keys[h] = a
		}
		a.fail(now, l)
		w = max(w, waitFrom(a.blocked, now))
	}
	return w
}

func (m *memAttempts) wait(now int64, keys []string) time.Duration {
	m.mu.Lock()
	defer m.mu.Unlock()
	var w time.Duration
	for _, k := range keys {
		if a := m.keys[string(secretHash(k))]; a != nil {
			w = max(w, waitFrom(a.blocked, now))
		}
	}
	return w
}

func (m *memAttempts) clear(key string) {
	m.mu.Lock()
	defer m.mu.Unlock()
	delete(m.keys, string(secretHash(key)))
}
