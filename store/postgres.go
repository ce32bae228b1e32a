package store

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"errors"
	"fmt"
	"io"
	"net"
	"net/url"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/stdlib"
)

// ErrBadURL is returned by Open for a postgres:// URL it cannot read.
var ErrBadURL = errors.New("malformed database URL")

// ErrUnreachable is returned by Open when the PostgreSQL server cannot be
// reached or refuses the login.
var ErrUnreachable = errors.New("cannot connect to the database server")

// ErrUnavailable wraps an error of a PostgreSQL server that cannot be
// reached (stopped, restarting, the network down): the request may be
// tried again once it is back. The store reconnects by itself.
var ErrUnavailable = errors.New("the database server is unavailable")

// IsURL reports whether a --db value names a PostgreSQL database
// (postgres:// or postgresql://) rather than a SQLite file.
func IsURL(db string) bool {
	l := strings.ToLower(db)
	return strings.HasPrefix(l, "postgres://") || strings.HasPrefix(l, "postgresql://")
}

// Redact returns a --db value fit to print: a URL without its password
// (user@host kept, so that the reader knows which server is meant), a
// file path as it is.
func Redact(db string) string {
	if !IsURL(db) {
		return db
	}
	u, err := url.Parse(db)
	if err != nil {
		// Cut everything between the scheme and the host: it may hold the
		// password in a form url.Parse refused.
		scheme, rest, _ := strings.Cut(db, "://")
		if i := strings.LastIndex(rest, "@"); i >= 0 {
			rest = rest[i+1:]
		}
		return scheme + "://" + rest
	}
	if u.User != nil {
		u.User = url.User(u.User.Username())
	}
	q := u.Query()
	if q.Has("password") {
		q.Del("password")
		u.RawQuery = q.Encode()
	}
	return u.String()
}

// secretsOf lists the texts of a URL that must never be printed: its
// password, raw and decoded.
func secretsOf(db string) []string {
	var out []string
	if u, err := url.Parse(db); err == nil {
		if p, ok := u.User.Password(); ok && p != "" {
			out = append(out, p, url.QueryEscape(p), url.PathEscape(p))
		}
		if p := u.Query().Get("password"); p != "" {
			out = append(out, p, url.QueryEscape(p))
		}
	} else if _, rest, ok := strings.Cut(db, "://"); ok {
		if at := strings.LastIndex(rest, "@"); at >= 0 {
			if _, p, ok := strings.Cut(rest[:at], ":"); ok && p != "" {
				out = append(out, p)
			}
		}
	}
	return out
}

// scrubbed is an error from the database driver with the password cut
// out of its text (the driver's messages may quote the connection string).
type scrubbed struct {
	msg string
	err error
}

func (e *scrubbed) Error() string { return e.msg }
func (e *scrubbed) Unwrap() error { return e.err }

func scrub(err error, secrets []string) error {
	if err == nil {
		return nil
	}
	msg := strings.Join(strings.Fields(err.Error()), " ") // one line
	for _, s := range secrets {
		msg = strings.ReplaceAll(msg, s, "********")
	}
	return &scrubbed{msg: msg, err: err}
}

// pgHost names the server of a connection configuration as host:port.
func pgHost(cfg *pgconn.Config) string {
	if strings.HasPrefix(cfg.Host, "/") {
		return fmt.Sprintf("%s (port %d)", cfg.Host, cfg.Port)
	}
	return fmt.Sprintf("%s:%d", cfg.Host, cfg.Port)
}

// openPostgres opens the PostgreSQL database of the URL raw, applying the
// migrations it lacks. The writer and the readers are connections of
// their own, as on SQLite; the readers' transactions are read-only.
func openPostgres(raw string) (*DB, error) { return openPostgresAs(raw, "lotwatch") }

// openPostgresAs is openPostgres with the application name its
// connections show in pg_stat_activity.
func openPostgresAs(raw, app string) (*DB, error) {
	name, secrets := Redact(raw), secretsOf(raw)
	cfg, err := pgConfig(raw, app)
	if err != nil {
		return nil, fmt.Errorf("store: %s: %w", name, err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), cfg.ConnectTimeout+5*time.Second)
	defer cancel()
	w, err := pgConnect(ctx, cfg, 1, secrets)
	if err != nil {
		return nil, fmt.Errorf("store: %s: %w", name, err)
	}
	if err := migrateWith(w, name, postgresDialect); err != nil {
		w.Close()
		return nil, scrub(err, secrets)
	}
	rcfg := cfg.Copy()
	rcfg.RuntimeParams["default_transaction_read_only"] = "on"
	r := pgPool(rcfg, readConns)
	db := &DB{path: name, d: postgresDialect, w: w, r: r, jobs: make(chan *job, 256), quit: make(chan struct{}), done: make(chan struct{})}
	if err := checkChain(ctx, db.w); err != nil {
		w.Close()
		r.Close()
		return nil, scrub(err, secrets)
	}
	if err := db.prepareHot(); err != nil {
		w.Close()
		r.Close()
		return nil, scrub(err, secrets)
	}
	go db.writer()
	return db, nil
}

// readConns is the size of a pool of reading connections.
const readConns = 8

// pgConfig reads a PostgreSQL URL for connections that name themselves
// app (in pg_stat_activity) and give up connecting after 10 s unless the
// URL says otherwise.
func pgConfig(raw, app string) (*pgx.ConnConfig, error) {
	cfg, err := pgx.ParseConfig(raw)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrBadURL, scrub(err, secretsOf(raw)))
	}
	cfg.RuntimeParams["application_name"] = app
	if cfg.ConnectTimeout == 0 {
		cfg.ConnectTimeout = 10 * time.Second
	}
	return cfg, nil
}

// pgPool is a pool of at most conns connections of cfg, taking the
// store's queries as written (see rebindConnector).
func pgPool(cfg *pgx.ConnConfig, conns int) *sql.DB {
	db := sql.OpenDB(rebindConnector{stdlib.GetConnector(*cfg)})
	db.SetMaxOpenConns(conns)
	db.SetMaxIdleConns(conns)
	return db
}

// pgConnect is pgPool, once the server has answered: an error names the
// host, without the password.
func pgConnect(ctx context.Context, cfg *pgx.ConnConfig, conns int, secrets []string) (*sql.DB, error) {
	db := pgPool(cfg, conns)
	if err := db.PingContext(ctx); err != nil {
		db.Close()
		return nil, fmt.Errorf("%w at %s: %w", ErrUnreachable, pgHost(&cfg.Config), scrub(err, secrets))
	}
	return db, nil
}

// rebindConnector hands out PostgreSQL connections that take the store's
// queries as they are written, with ? placeholders: it numbers them $1,
// $2, … (see rebind), so that each query of the store exists once.
type rebindConnector struct{ driver.Connector }

func (c rebindConnector) Connect(ctx context.Context) (driver.Conn, error) {
	conn, err := c.Connector.Connect(ctx)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrUnavailable, err)
	}
	return rebindConn{conn.(*stdlib.Conn)}, nil
}

type rebindConn struct{ *stdlib.Conn }

func (c rebindConn) Prepare(q string) (driver.Stmt, error) {
	st, err := c.Conn.Prepare(rebind(q))
	return st, tagUnavailable(err)
}
func (c rebindConn) PrepareContext(ctx context.Context, q string) (driver.Stmt, error) {
	st, err := c.Conn.PrepareContext(ctx, rebind(q))
	return st, tagUnavailable(err)
}
func (c rebindConn) ExecContext(ctx context.Context, q string, args []driver.NamedValue) (driver.Result, error) {
	r, err := c.Conn.ExecContext(ctx, rebind(q), args)
	return r, tagUnavailable(err)
}
func (c rebindConn) QueryContext(ctx context.Context, q string, args []driver.NamedValue) (driver.Rows, error) {
	r, err := c.Conn.QueryContext(ctx, rebind(q), args)
	return r, tagUnavailable(err)
}
func (c rebindConn) BeginTx(ctx context.Context, opts driver.TxOptions) (driver.Tx, error) {
	tx, err := c.Conn.BeginTx(ctx, opts)
	return tx, tagUnavailable(err)
}

// tagUnavailable wraps ErrUnavailable around an error that says the
// server is gone (the connection broke, the server is shutting down or
// starting), keeping the error itself (database/sql retries a bad
// connection on another).
func tagUnavailable(err error) error {
	if err == nil || errors.Is(err, ErrUnavailable) {
		return err
	}
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		if !strings.HasPrefix(pe.Code, "08") && !strings.HasPrefix(pe.Code, "57P") {
			return err
		}
	} else {
		var ne net.Error
		if !errors.Is(err, driver.ErrBadConn) && !errors.As(err, &ne) && !errors.Is(err, io.EOF) && !errors.Is(err, io.ErrUnexpectedEOF) &&
			!pgconn.SafeToRetry(err) && !strings.Contains(err.Error(), "conn closed") {
			return err
		}
	}
	return fmt.Errorf("%w: %w", ErrUnavailable, err)
}

// rebind numbers the ? placeholders of q as $1, $2, …, leaving quoted
// text, quoted names and comments alone.
func rebind(q string) string {
	if !strings.Contains(q, "?") {
		return q
	}
	var b strings.Builder
	n := 0
	for i := 0; i < len(q); i++ {
		c := q[i]
		switch {
		case c == '\'' || c == '"':
			j := strings.IndexByte(q[i+1:], c)
			if j < 0 {
				b.WriteString(q[i:])
				return b.String()
			}
			b.WriteString(q[i : i+j+2])
			i += j + 1
		case c == '-' && i+1 < len(q) && q[i+1] == '-':
			j := strings.IndexByte(q[i:], '\n')
			if j < 0 {
				b.WriteString(q[i:])
				return b.String()
			}
			b.WriteString(q[i : i+j])
			i += j - 1
		case c == '?':
			n++
			fmt.Fprintf(&b, "$%d", n)
		default:
			b.WriteByte(c)
		}
	}
	return b.String()
}

// pgCode is the SQLSTATE of a PostgreSQL error, "" for other errors.
func pgCode(err error) string {
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		return pe.Code
	}
	return ""
}

// CheckNamedValue passes a Go bool as 0 or 1: the store's flags are
// INTEGER columns on both databases, as SQLite stores them.
func (c rebindConn) CheckNamedValue(nv *driver.NamedValue) error {
	if b, ok := nv.Value.(bool); ok {
		nv.Value = int64(0)
		if b {
			nv.Value = int64(1)
		}
		return nil
	}
	return c.Conn.CheckNamedValue(nv)
}

// rawPostgres opens the database of the URL as plain SQL with the store's
// placeholders, without migrating it: for reading the tables of a
// database that may not be a lotwatch one yet (and for tests).
func rawPostgres(raw string) (*sql.DB, error) {
	cfg, err := pgx.ParseConfig(raw)
	if err != nil {
		return nil, fmt.Errorf("store: %s: %w: %w", Redact(raw), ErrBadURL, scrub(err, secretsOf(raw)))
	}
	return sql.OpenDB(rebindConnector{stdlib.GetConnector(*cfg)}), nil
}

// Secrets returns the passwords of the database URLs among a command's
// arguments (given as a value of their own or after "="), for masking
// wherever the command prints.
func Secrets(args []string) []string {
	var out []string
	for _, a := range args {
		if i := strings.Index(a, "="); i >= 0 && strings.HasPrefix(a, "-") {
			a = a[i+1:]
		}
		if IsURL(a) {
			out = append(out, secretsOf(a)...)
		}
	}
	return out
}
