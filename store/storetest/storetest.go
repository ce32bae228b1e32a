// Package storetest gives the tests of the packages above store a fresh,
// empty database of each backend: a SQLite file in a temporary folder,
// and a schema of its own on the PostgreSQL server named by
// LOTWATCH_TEST_POSTGRES (dropped when the test ends). Without that
// variable the PostgreSQL backend is skipped with a message, and fails
// the test when CI=true.
//
// DB gives a test the database of the backend the run is for
// (LOTWATCH_TEST_BACKEND), so that one suite runs on either.
package storetest

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"net/url"
	"os"
	"path/filepath"
	"testing"
	"time"

	_ "github.com/jackc/pgx/v5/stdlib" // the driver of the test server
)

// Backend is one kind of database; DB returns the --db value of a new,
// empty one for the test.
type Backend struct {
	Name string
	DB   func(t testing.TB) string
}

// BackendEnv names the environment variable choosing the backend of DB:
// "sqlite" (the default, also when empty) or "postgres".
const BackendEnv = "LOTWATCH_TEST_BACKEND"

// Chosen is the backend this run of the tests is for (BackendEnv); a
// value naming no backend fails the test, as a misspelt one would
// otherwise test SQLite while claiming PostgreSQL.
func Chosen(t testing.TB) Backend {
	t.Helper()
	name := os.Getenv(BackendEnv)
	if name == "" {
		return Backends[0]
	}
	for _, b := range Backends {
		if b.Name == name {
			return b
		}
	}
	t.Fatalf("%s=%q names no backend (sqlite or postgres)", BackendEnv, name)
	return Backend{}
}

// DB returns the --db value of a new, empty database of the chosen
// backend (see Chosen): a SQLite file by default, a schema of its own on
// the test server under LOTWATCH_TEST_BACKEND=postgres.
func DB(t testing.TB) string {
	t.Helper()
	return Chosen(t).DB(t)
}

// SQLiteOnly skips the test under another backend: for a test about the
// SQLite file itself (its folder, its mode, a full or read-only disk),
// which has no counterpart on a database server. why says what it is
// about.
func SQLiteOnly(t testing.TB, why string) {
	t.Helper()
	if b := Chosen(t); b.Name != "sqlite" {
		t.Skipf("SQLite only (%s): not run on %s", why, b.Name)
	}
}

// Backends is the table of backends every such test runs on.
var Backends = []Backend{
	{"sqlite", func(t testing.TB) string { return filepath.Join(t.TempDir(), "lotwatch.db") }},
	{"postgres", PostgresSchema},
}

// PostgresURL is the test server's URL (LOTWATCH_TEST_POSTGRES, see
// .ci/postgres); without it the test is skipped, or failed when CI=true.
func PostgresURL(t testing.TB) string {
	t.Helper()
	return serverURL(t, "LOTWATCH_TEST_POSTGRES", "PostgreSQL")
}

// serverURL is the URL in the environment variable env; without it the
// test is skipped, or failed when CI=true (CI must test what on a real
// server).
func serverURL(t testing.TB, env, what string) string {
	t.Helper()
	u := os.Getenv(env)
	if u == "" {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s is not set (CI must test %s: see .ci/postgres)", env, what)
		}
		t.Skipf("%s is not set: %s not tested (source .ci/postgres to start one)", env, what)
	}
	return u
}

// PostgresSchema creates an empty schema on the test server, dropped when
// the test ends, and returns the URL whose connections use it.
func PostgresSchema(t testing.TB) string {
	t.Helper()
	schema := "test_" + randomName()
	u := createOnServer(t, "SCHEMA "+schema, "DROP SCHEMA "+schema+" CASCADE")
	q := u.Query()
	q.Set("search_path", schema)
	u.RawQuery = q.Encode()
	return u.String()
}

// PostgresDatabase creates an empty database on the test server, dropped
// when the test ends, and returns its URL: for a test that needs a
// database of its own (restore counts the sessions on the database).
func PostgresDatabase(t testing.TB) string {
	t.Helper()
	name := "lotwatch_test_" + randomName()
	u := createOnServer(t, "DATABASE "+name, "DROP DATABASE "+name+" WITH (FORCE)")
	u.Path = "/" + name
	return u.String()
}

// createOnServer runs CREATE what on the test server and drop when the
// test ends, and returns the server's URL for the caller to point at it.
func createOnServer(t testing.TB, what, drop string) *url.URL {
	t.Helper()
	base := PostgresURL(t)
	u, err := url.Parse(base)
	if err != nil {
		t.Fatal(err)
	}
	admin, err := sql.Open("pgx", base)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := admin.Exec("CREATE " + what); err != nil {
		admin.Close()
		t.Fatal(err)
	}
	// Registered first, so run last: after the store using it is closed.
	t.Cleanup(func() {
		defer admin.Close()
		if _, err := admin.Exec(drop); err != nil {
			t.Errorf("%s: %v", drop, err)
		}
	})
	return u
}

func randomName() string {
	b := make([]byte, 6)
	rand.Read(b)
	return hex.EncodeToString(b)
}

// ReplicaOf returns the URL that reads the database of db (a URL of the
// test server, as PostgresSchema or PostgresDatabase give) on the
// server's streaming replica, LOTWATCH_TEST_POSTGRES_REPLICA (see
// .ci/postgres); without it the test is skipped, or failed when CI=true.
func ReplicaOf(t testing.TB, db string) string {
	t.Helper()
	rep := serverURL(t, "LOTWATCH_TEST_POSTGRES_REPLICA", "the read replica")
	ru, err := url.Parse(rep)
	if err != nil {
		t.Fatal(err)
	}
	u, err := url.Parse(db)
	if err != nil {
		t.Fatal(err)
	}
	u.Host = ru.Host
	return u.String()
}

// HoldReplay pauses the replay of the test server's replica (replica is
// a URL of it, as ReplicaOf gives) and returns once it has stopped: a
// change committed on the server after that is not on the replica until
// the returned function lets replay go on (done at the test's end too).
// Tests of several packages run at once: one holds replay at a time (an
// advisory lock on the server), so that one's release does not end
// another's hold.
func HoldReplay(t testing.TB, replica string) (release func()) {
	t.Helper()
	ctx := context.Background()
	primary, err := sql.Open("pgx", PostgresURL(t))
	if err != nil {
		t.Fatal(err)
	}
	turn, err := primary.Conn(ctx)
	if err == nil {
		_, err = turn.ExecContext(ctx, "SELECT pg_advisory_lock($1)", holdReplayLock)
	}
	if err != nil {
		primary.Close()
		t.Fatalf("waiting for the turn to hold replay: %v", err)
	}
	rep, err := sql.Open("pgx", replica)
	if err != nil {
		t.Fatal(err)
	}
	released := false
	release = func() {
		if released {
			return
		}
		released = true
		if _, err := rep.Exec("SELECT pg_wal_replay_resume()"); err != nil {
			t.Errorf("resuming replay: %v", err)
		}
		turn.ExecContext(ctx, "SELECT pg_advisory_unlock($1)", holdReplayLock)
		turn.Close()
		primary.Close()
		rep.Close()
	}
	t.Cleanup(release)
	if _, err := rep.Exec("SELECT pg_wal_replay_pause()"); err != nil {
		t.Fatalf("pausing replay: %v", err)
	}
	for start := time.Now(); time.Since(start) < 30*time.Second; time.Sleep(10 * time.Millisecond) {
		var state string
		if err := rep.QueryRow("SELECT pg_get_wal_replay_pause_state()").Scan(&state); err != nil {
			t.Fatal(err)
		}
		if state == "paused" {
			return release
		}
	}
	t.Fatal("replay did not pause within 30 s")
	return release
}

// holdReplayLock is the advisory lock HoldReplay takes.
const holdReplayLock = 0x10717a7c
