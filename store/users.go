package store

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"database/sql"
	"encoding/base64"
	"errors"
	"fmt"
	"github.com/mattn/go-sqlite3"
	"strings"
	"time"
	"unicode"

	"golang.org/x/crypto/bcrypt"
)

// Role is what a user may do. Each role may do all that the ones before it
// may: viewer < inspector < engineer < admin.
type Role string

// The roles.
const (
	RoleViewer    Role = "viewer"    // reads the board, charts, lots, reviews, plans
	RoleInspector Role = "inspector" // also logs, corrects and voids lots; records causes
	RoleEngineer  Role = "engineer"  // also adds and changes processes; freezes limit sets
	RoleAdmin     Role = "admin"     // also manages users and API tokens
)

var roleRank = map[Role]int{RoleViewer: 1, RoleInspector: 2, RoleEngineer: 3, RoleAdmin: 4}

// ParseRole returns the role named by s (case-insensitive).
func ParseRole(s string) (Role, error) {
	r := Role(strings.ToLower(strings.TrimSpace(s)))
	if _, ok := roleRank[r]; !ok {
		return "", fmt.Errorf("unknown role %q (want viewer, inspector, engineer or admin): %w", s, ErrInvalid)
	}
	return r, nil
}

// AtLeast reports whether r may do what min may.
func (r Role) AtLeast(min Role) bool { return roleRank[r] >= roleRank[min] && roleRank[r] > 0 }

// User is a person who signs in.
type User struct {
	ID      int64
	Name    string
	Role    Role
	Active  bool
	Created time.Time
}

// MinPasswordLen is the shortest password accepted (NIST SP 800-63B §5.1.1.2
// asks for at least 8 characters).
const MinPasswordLen = 8

// bcryptCost is bcrypt's work factor (the library default, 10).
var bcryptCost = bcrypt.DefaultCost

// CheckUserName refuses a user name AddUser would refuse, so that a
// command can say so before it asks for a password.
func CheckUserName(name string) error {
	if ps := checkUserName(name); len(ps) > 0 {
		return invalid(ps...)
	}
	return nil
}

func checkUserName(name string) []Problem {
	if name == "" {
		return []Problem{{Field: "name", Reason: "is empty"}}
	}
	if strings.TrimSpace(name) != name || strings.IndexFunc(name, func(r rune) bool { return unicode.IsSpace(r) || unicode.IsControl(r) }) >= 0 {
		return []Problem{{Field: "name", Value: name, Reason: "must not contain spaces or control characters"}}
	}
	// A name is a path segment of the users page's forms
	// (/admin/users/NAME/password): nothing in it may end or split one.
	if strings.ContainsAny(name, "/?#") {
		return []Problem{{Field: "name", Value: name, Reason: "must not contain /, ? or #"}}
	}
	if len(name) > 64 {
		return []Problem{{Field: "name", Value: name, Reason: "is longer than 64 bytes"}}
	}
	return nil
}

func checkPassword(pw string) []Problem {
	switch {
	case len([]rune(pw)) < MinPasswordLen:
		return []Problem{{Field: "password", Reason: fmt.Sprintf("is shorter than %d characters", MinPasswordLen)}}
	case len(pw) > 72: // bcrypt reads at most 72 bytes
		return []Problem{{Field: "password", Reason: "is longer than 72 bytes"}}
	}
	return nil
}

// AddUser creates an active user. The password is stored as a bcrypt hash.
func (db *DB) AddUser(ctx context.Context, actor, name string, role Role, password string) (User, error) {
	ps := checkUserName(name)
	if _, ok := roleRank[role]; !ok {
		ps = append(ps, Problem{Field: "role", Value: string(role), Reason: "is not viewer, inspector, engineer or admin"})
	}
	ps = append(ps, checkPassword(password)...)
	if len(ps) > 0 {
		return User{}, invalid(ps...)
	}
	hash, err := bcrypt.GenerateFromPassword([]byte(password), bcryptCost)
	if err != nil {
		return User{}, fmt.Errorf("store: hash password: %w", err)
	}
	u := User{Name: name, Role: role, Active: true}
	err = db.write(ctx, func(w *wtx) error {
		u.Created = w.now
		err := w.QueryRow("INSERT INTO users (name, role, password_hash, active, created) VALUES (?, ?, ?, 1, ?) RETURNING id", name, role, string(hash), w.now.UnixNano()).Scan(&u.ID)
		if isUnique(err) {
			return fmt.Errorf("user %q already exists: %w", name, ErrConflict)
		}
		if err != nil {
			return err
		}
		return w.audit(actor, "add", "user", u.ID, u.ID, nil, userAudit{name, role, true, credentialDigest(hash)}, "")
	})
	if err != nil {
		return User{}, err
	}
	u.Created = u.Created.UTC()
	return u, nil
}

// dummyHash keeps Authenticate's time the same for unknown users.
var dummyHash, _ = bcrypt.GenerateFromPassword([]byte("lotwatch-no-such-user"), bcrypt.DefaultCost)

// Authenticate checks a password. Unknown users, inactive users and wrong
// passwords all give ErrBadCredentials.
func (db *DB) Authenticate(ctx context.Context, name, password string) (User, error) {
	var u User
	var hash string
	var created int64
	err := db.r.QueryRowContext(ctx, "SELECT id, name, role, active, created, password_hash FROM users WHERE name = ?", name).
		Scan(&u.ID, &u.Name, &u.Role, &u.Active, &created, &hash)
	if errors.Is(err, sql.ErrNoRows) {
		bcrypt.CompareHashAndPassword(dummyHash, []byte(password))
		return User{}, ErrBadCredentials
	}
	if err != nil {
		return User{}, err
	}
	if bcrypt.CompareHashAndPassword([]byte(hash), []byte(password)) != nil || !u.Active {
		return User{}, ErrBadCredentials
	}
	u.Created = fromNanos(created, time.UTC)
	return u, nil
}

// SetPassword replaces a user's password and ends the user's sessions.
func (db *DB) SetPassword(ctx context.Context, actor, name, newPassword string) error {
	if ps := checkPassword(newPassword); len(ps) > 0 {
		return invalid(ps...)
	}
	hash, err := bcrypt.GenerateFromPassword([]byte(newPassword), bcryptCost)
	if err != nil {
		return fmt.Errorf("store: hash password: %w", err)
	}
	return db.write(ctx, func(w *wtx) error {
		var id int64
		if err := w.QueryRow("SELECT id FROM users WHERE name = ?", name).Scan(&id); errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("user %q: %w", name, ErrNotFound)
		} else if err != nil {
			return err
		}
		if _, err := w.Exec("UPDATE users SET password_hash = ? WHERE id = ?", string(hash), id); err != nil {
			return err
		}
		if _, err := w.Exec("DELETE FROM sessions WHERE user_id = ?", id); err != nil {
			return err
		}
		db.mem.removeUser(id)
		return w.audit(actor, "set password", "user", id, id, nil, credentialAudit{Password: credentialDigest(hash)}, "")
	})
}

// SetUserActive activates or deactivates a user (users are never deleted).
func (db *DB) SetUserActive(ctx context.Context, actor, name string, active bool, reason string) error {
	if ps := checkText("reason", reason, 4000, false); len(ps) > 0 {
		return invalid(ps...)
	}
	return db.write(ctx, func(w *wtx) error {
		var id int64
		var was bool
		var role Role
		if err := w.QueryRow("SELECT id, active, role FROM users WHERE name = ?", name).Scan(&id, &was, &role); errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("user %q: %w", name, ErrNotFound)
		} else if err != nil {
			return err
		}
		if _, err := w.Exec("UPDATE users SET active = ? WHERE id = ?", active, id); err != nil {
			return err
		}
		if !active {
			if _, err := w.Exec("DELETE FROM sessions WHERE user_id = ?", id); err != nil {
				return err
			}
			db.mem.removeUser(id)
		}
		return w.audit(actor, "set active", "user", id, id, userAudit{Name: name, Role: role, Active: was}, userAudit{Name: name, Role: role, Active: active}, reason)
	})
}

const userCols = "id, name, role, active, created"

func scanUser(s interface{ Scan(...any) error }) (User, error) {
	var u User
	var created int64
	err := s.Scan(&u.ID, &u.Name, &u.Role, &u.Active, &created)
	u.Created = fromNanos(created, time.UTC)
	return u, err
}

// Users lists all users by name.
func (db *DB) Users(ctx context.Context) ([]User, error) {
	rows, err := db.r.QueryContext(ctx, "SELECT "+userCols+" FROM users ORDER BY name")
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []User
	for rows.Next() {
		u, err := scanUser(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, u)
	}
	return out, rows.Err()
}

// UserByName returns the user, or ErrNotFound.
func (db *DB) UserByName(ctx context.Context, name string) (User, error) {
	u, err := scanUser(db.r.QueryRowContext(ctx, "SELECT "+userCols+" FROM users WHERE name = ?", name))
	if errors.Is(err, sql.ErrNoRows) {
		return User{}, fmt.Errorf("user %q: %w", name, ErrNotFound)
	}
	return u, err
}

// randomSecret returns 32 random bytes, base64url without padding.
func randomSecret() (string, error) {
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", err
	}
	return base64.RawURLEncoding.EncodeToString(b[:]), nil
}

func secretHash(raw string) []byte {
	h := sha256.Sum256([]byte(raw))
	return h[:]
}

// CreateSession starts a session for the user and returns its raw id
// (32 random bytes, base64url). Only its SHA-256 is stored.
func (db *DB) CreateSession(ctx context.Context, userID int64, now time.Time) (string, error) {
	raw, err := randomSecret()
	if err != nil {
		return "", err
	}
	if db.readOnly {
		db.mem.create(secretHash(raw), userID, now)
		return raw, nil
	}
	err = db.write(ctx, func(w *wtx) error {
		_, err := w.Exec("INSERT INTO sessions (id_hash, user_id, created, last_seen) VALUES (?, ?, ?, ?)", secretHash(raw), userID, now.UnixNano(), now.UnixNano())
		return err
	})
	if diskFull(err) {
		// A full disk must not keep users from reading: the session
		// is kept in memory, as for a read-only database, until the
		// server stops.
		db.mem.create(secretHash(raw), userID, now)
		return raw, nil
	}
	if err != nil {
		return "", fmt.Errorf("store: create session: %w", err)
	}
	return raw, nil
}

// sessionTouchEvery limits last-seen writes to one per minute per session.
const sessionTouchEvery = time.Minute

// SessionUser returns the active user of a live session and notes it as
// seen (best effort: a failed note does not fail the read). A session
// idle longer than idle, older than absolute, of an inactive user, or
// unknown gives ErrNotFound.
func (db *DB) SessionUser(ctx context.Context, rawID string, now time.Time, idle, absolute time.Duration) (User, error) {
	h := secretHash(rawID)
	if db.readOnly {
		return db.memSessionUser(ctx, h, now, idle, absolute)
	}
	var created, seen int64
	row := db.r.QueryRowContext(ctx, `SELECT u.id, u.name, u.role, u.active, u.created, s.created, s.last_seen
		FROM sessions s JOIN users u ON u.id = s.user_id WHERE s.id_hash = ?`, h)
	var u User
	var ucreated int64
	err := row.Scan(&u.ID, &u.Name, &u.Role, &u.Active, &ucreated, &created, &seen)
	if errors.Is(err, sql.ErrNoRows) {
		return db.memSessionUser(ctx, h, now, idle, absolute) // begun on a full disk, or unknown
	}
	if err != nil {
		return User{}, err
	}
	u.Created = fromNanos(ucreated, time.UTC)
	n := now.UnixNano()
	if !u.Active || (idle > 0 && n-seen > int64(idle)) || (absolute > 0 && n-created > int64(absolute)) {
		db.write(ctx, func(w *wtx) error {
			_, err := w.Exec("DELETE FROM sessions WHERE id_hash = ?", h)
			return err
		})
		return User{}, fmt.Errorf("session expired: %w", ErrNotFound)
	}
	if n-seen >= int64(sessionTouchEvery) {
		// The last-seen time is best effort: on a full disk (or a
		// database that cannot be written) the user still reads. The
		// idle limit then counts from the last time written, so a
		// session can end early, never late.
		_ = db.write(ctx, func(w *wtx) error {
			_, err := w.Exec("UPDATE sessions SET last_seen = ? WHERE id_hash = ?", n, h)
			return err
		})
	}
	return u, nil
}

// DeleteSession ends a session (signing out). An unknown id is no error.
func (db *DB) DeleteSession(ctx context.Context, rawID string) error {
	if db.readOnly {
		db.mem.remove(secretHash(rawID))
		return nil
	}
	db.mem.remove(secretHash(rawID))
	return db.write(ctx, func(w *wtx) error {
		_, err := w.Exec("DELETE FROM sessions WHERE id_hash = ?", secretHash(rawID))
		return err
	})
}

// Token is an API token; the raw token is shown once at creation and only
// its SHA-256 is stored.
type Token struct {
	ID      int64
	UserID  int64
	User    string
	Label   string
	Created time.Time
	Revoked bool
}

// TokenPrefix starts every raw token so that it is recognisable in logs
// and secret scanners.
const TokenPrefix = "lw_"

// CreateToken makes an API token for the user and returns the raw token
// (once) and its record.
func (db *DB) CreateToken(ctx context.Context, actor, userName, label string) (string, Token, error) {
	if strings.IndexFunc(label, unicode.IsControl) >= 0 {
		// A label is shown one per line in lists and logs.
		return "", Token{}, invalid(Problem{Field: "label", Value: label, Reason: "must not contain line breaks, tabs or other control characters"})
	}
	if strings.IndexFunc(label, isFormat) >= 0 {
		return "", Token{}, invalid(formatProblem("label", label))
	}
	secret, err := randomSecret()
	if err != nil {
		return "", Token{}, err
	}
	raw := TokenPrefix + secret
	t := Token{User: userName, Label: label}
	err = db.write(ctx, func(w *wtx) error {
		var active bool
		if err := w.QueryRow("SELECT id, active FROM users WHERE name = ?", userName).Scan(&t.UserID, &active); errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("user %q: %w", userName, ErrNotFound)
		} else if err != nil {
			return err
		}
		if !active {
			return invalid(Problem{Field: "user", Value: userName, Reason: "is not active"})
		}
		t.Created = w.now.UTC()
		hash := secretHash(raw)
		err := w.QueryRow("INSERT INTO tokens (user_id, label, hash, created) VALUES (?, ?, ?, ?) RETURNING id", t.UserID, label, hash, w.now.UnixNano()).Scan(&t.ID)
		if err != nil {
			return err
		}
		return w.audit(actor, "add", "token", t.ID, t.ID, nil, tokenAudit{Label: label, User: userName, Hash: credentialDigest(hash)}, "")
	})
	if err != nil {
		return "", Token{}, err
	}
	return raw, t, nil
}

// TokenUser returns the active user of a token; ErrNotFound when the
// token is unknown or revoked.
func (db *DB) TokenUser(ctx context.Context, raw string) (User, error) {
	u, err := scanUser(db.r.QueryRowContext(ctx, `SELECT u.id, u.name, u.role, u.active, u.created
		FROM tokens t JOIN users u ON u.id = t.user_id WHERE t.hash = ? AND t.revoked = 0 AND u.active = 1`, secretHash(raw)))
	if errors.Is(err, sql.ErrNoRows) {
		return User{}, fmt.Errorf("token: %w", ErrNotFound)
	}
	return u, err
}

// RevokeToken revokes a token for good.
func (db *DB) RevokeToken(ctx context.Context, actor string, id int64) error {
	return db.write(ctx, func(w *wtx) error {
		var revoked bool
		if err := w.QueryRow("SELECT revoked FROM tokens WHERE id = ?", id).Scan(&revoked); errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("token %d: %w", id, ErrNotFound)
		} else if err != nil {
			return err
		}
		if revoked {
			return nil
		}
		if _, err := w.Exec("UPDATE tokens SET revoked = 1 WHERE id = ?", id); err != nil {
			return err
		}
		return w.audit(actor, "revoke", "token", id, id, map[string]bool{"revoked": false}, map[string]bool{"revoked": true}, "")
	})
}

// Tokens lists all tokens (never the raw values), oldest first.
func (db *DB) Tokens(ctx context.Context) ([]Token, error) {
	rows, err := db.r.QueryContext(ctx, `SELECT t.id, t.user_id, u.name, t.label, t.created, t.revoked
		FROM tokens t JOIN users u ON u.id = t.user_id ORDER BY t.id`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Token
	for rows.Next() {
		var t Token
		var created int64
		if err := rows.Scan(&t.ID, &t.UserID, &t.User, &t.Label, &created, &t.Revoked); err != nil {
			return nil, err
		}
		t.Created = fromNanos(created, time.UTC)
		out = append(out, t)
	}
	return out, rows.Err()
}

// diskFull reports whether a write failed because the disk is full.
func diskFull(err error) bool {
	var se sqlite3.Error
	return errors.As(err, &se) && se.Code == sqlite3.ErrFull
}
