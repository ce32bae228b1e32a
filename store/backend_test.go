package store

import (
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"net/url"
	"os"
	"sort"
	"strings"
	"testing"

	_ "github.com/jackc/pgx/v5/stdlib"
)

// opener opens a new, empty database of one backend for a test and
// returns it with the --db value that names it (a file path or a URL).
type opener func(t testing.TB) (*DB, string)

// backends is the table of databases the store's tests run against:
// SQLite in a temporary file, and PostgreSQL in a fresh schema of the
// server named by LOTWATCH_TEST_POSTGRES.
var backends = []struct {
	name string
	open opener
}{
	{"sqlite", openTemp},
	{"postgres", openPostgresTemp},
}

// forEachBackend runs f once per backend, as subtests named after them.
func forEachBackend(t *testing.T, f func(t *testing.T, open opener)) {
	t.Helper()
	for _, b := range backends {
		t.Run(b.name, func(t *testing.T) { f(t, b.open) })
	}
}

// postgresURL is the test server's URL, or the test is skipped (locally)
// or failed (when CI=true) without one.
func postgresURL(t testing.TB) string {
	t.Helper()
	u := os.Getenv("LOTWATCH_TEST_POSTGRES")
	if u == "" {
		if os.Getenv("CI") == "true" {
			t.Fatal("LOTWATCH_TEST_POSTGRES is not set (CI must test on PostgreSQL: see .ci/postgres)")
		}
		t.Skip("LOTWATCH_TEST_POSTGRES is not set: PostgreSQL not tested (source .ci/postgres to start one)")
	}
	return u
}

// openPostgresTemp opens a new schema of the test server, dropped when
// the test ends, so that tests do not see each other's rows.
func openPostgresTemp(t testing.TB) (*DB, string) {
	t.Helper()
	u := newPostgresSchema(t)
	db, err := Open(u)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db, u
}

// newPostgresSchema creates an empty schema on the test server and
// returns the URL whose connections use it.
func newPostgresSchema(t testing.TB) string {
	t.Helper()
	base := postgresURL(t)
	admin, err := sql.Open("pgx", base)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { admin.Close() })
	b := make([]byte, 6)
	rand.Read(b)
	schema := "test_" + hex.EncodeToString(b)
	if _, err := admin.Exec("CREATE SCHEMA " + schema); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if _, err := admin.Exec("DROP SCHEMA " + schema + " CASCADE"); err != nil {
			t.Errorf("drop schema %s: %v", schema, err)
		}
	})
	pu, err := url.Parse(base)
	if err != nil {
		t.Fatal(err)
	}
	q := pu.Query()
	q.Set("search_path", schema)
	pu.RawQuery = q.Encode()
	return pu.String()
}

// TestSchemasAgree: a new SQLite database and a new PostgreSQL one have
// the same tables with the same columns, so that a migration added for
// one database and not the other is caught here (and Copy, which copies
// by column name, moves every column).
func TestSchemasAgree(t *testing.T) {
	columns := func(db *DB) map[string]string {
		t.Helper()
		rows, err := db.r.Query(db.d.tables)
		if err != nil {
			t.Fatal(err)
		}
		var tables []string
		for rows.Next() {
			var n string
			rows.Scan(&n)
			tables = append(tables, n)
		}
		rows.Close()
		out := map[string]string{}
		for _, tb := range tables {
			rows, err := db.r.Query("SELECT * FROM " + tb + " LIMIT 0")
			if err != nil {
				t.Fatal(err)
			}
			cols, _ := rows.Columns()
			rows.Close()
			sort.Strings(cols)
			out[tb] = strings.Join(cols, ",")
		}
		return out
	}
	lite, _ := openTemp(t)
	pg, _ := openPostgresTemp(t)
	a, b := columns(lite), columns(pg)
	for tb, cols := range a {
		if b[tb] != cols {
			t.Errorf("table %s: SQLite has columns %s, PostgreSQL %q", tb, cols, b[tb])
		}
	}
	for tb := range b {
		if _, ok := a[tb]; !ok {
			t.Errorf("table %s is on PostgreSQL only", tb)
		}
	}
}
