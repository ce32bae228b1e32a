// Package storetest gives the tests of the packages above store a fresh,
// empty database of each backend: a SQLite file in a temporary folder,
// and a schema of its own on the PostgreSQL server named by
// LOTWATCH_TEST_POSTGRES (dropped when the test ends). Without that
// variable the PostgreSQL backend is skipped with a message, and fails
// the test when CI=true.
package storetest

import (
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"net/url"
	"os"
	"path/filepath"
	"testing"

	_ "github.com/jackc/pgx/v5/stdlib" // the driver of the test server
)

// Backend is one kind of database; DB returns the --db value of a new,
// empty one for the test.
type Backend struct {
	Name string
	DB   func(t testing.TB) string
}

// Backends is the table of backends every such test runs on.
var Backends = []Backend{
	{"sqlite", func(t testing.TB) string { return filepath.Join(t.TempDir(), "lotwatch.db") }},
	{"postgres", PostgresSchema},
}

// PostgresSchema creates an empty schema on the test server and returns
// the URL whose connections use it.
func PostgresSchema(t testing.TB) string {
	t.Helper()
	base := os.Getenv("LOTWATCH_TEST_POSTGRES")
	if base == "" {
		if os.Getenv("CI") == "true" {
			t.Fatal("LOTWATCH_TEST_POSTGRES is not set (CI must test on PostgreSQL: see .ci/postgres)")
		}
		t.Skip("LOTWATCH_TEST_POSTGRES is not set: PostgreSQL not tested (source .ci/postgres to start one)")
	}
	admin, err := sql.Open("pgx", base)
	if err != nil {
		t.Fatal(err)
	}
	b := make([]byte, 6)
	rand.Read(b)
	schema := "test_" + hex.EncodeToString(b)
	if _, err := admin.Exec("CREATE SCHEMA " + schema); err != nil {
		admin.Close()
		t.Fatal(err)
	}
	// Registered first, so run last: after the store using it is closed.
	t.Cleanup(func() {
		defer admin.Close()
		if _, err := admin.Exec("DROP SCHEMA " + schema + " CASCADE"); err != nil {
			t.Errorf("drop schema %s: %v", schema, err)
		}
	})
	u, err := url.Parse(base)
	if err != nil {
		t.Fatal(err)
	}
	q := u.Query()
	q.Set("search_path", schema)
	u.RawQuery = q.Encode()
	return u.String()
}
