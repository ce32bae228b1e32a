package store

import (
	"lotwatch/store/storetest"
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

// openAgain opens a second store on the database where (a file or a
// URL), as another server or program would, closed when the test ends.
func openAgain(t testing.TB, where string) *DB {
	t.Helper()
	db, err := Open(where)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db
}

// openPostgresTemp opens a new schema of the test server, dropped when
// the test ends, so that tests do not see each other's rows.
func openPostgresTemp(t testing.TB) (*DB, string) {
	t.Helper()
	u := storetest.PostgresSchema(t)
	db, err := Open(u)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db, u
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
