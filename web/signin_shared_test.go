package web

import (
	"io"
	"log/slog"
	"net/http"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
	"lotwatch/store/storetest"
)

// TestSignInLimitsSharedByServers: two servers on one database (two
// stores, as two `lotwatch serve` have) hold a client to one count: five
// bad passwords for a name from one address, split between the servers,
// block the pair on both with the same Retry-After, and block nobody
// else. A success on one server after the block clears it on the other.
func TestSignInLimitsSharedByServers(t *testing.T) {
	for _, b := range storetest.Backends {
		t.Run(b.Name, func(t *testing.T) {
			where := b.DB(t)
			one := newTestEnvOn(t, where)
			two := secondServer(t, one, where)
			servers := []*testEnv{one, two}
			for i := range 5 {
				rec := signInFrom(servers[i%2], "admin1", "wrong-password", "10.0.0.1", nil)
				if rec.Code != http.StatusUnauthorized {
					t.Fatalf("wrong password %d on server %d: %d, want 401", i+1, i%2+1, rec.Code)
				}
				if blocked := strings.Contains(rec.Body.String(), "wait 60 seconds"); blocked != (i == 4) {
					t.Errorf("wrong password %d on server %d: told to wait: %v, want %v", i+1, i%2+1, blocked, i == 4)
				}
			}
			for i, e := range servers {
				rec := signInFrom(e, "admin1", testPassword, "10.0.0.1", nil)
				if rec.Code != http.StatusTooManyRequests || rec.Header().Get("Retry-After") != "60" {
					t.Errorf("server %d, right password from the blocked address: %d Retry-After %q, want 429 and 60",
						i+1, rec.Code, rec.Header().Get("Retry-After"))
				}
				if rec := signInFrom(e, "admin1", testPassword, "10.0.0.2", nil); rec.Code != http.StatusSeeOther {
					t.Errorf("server %d, the name from another address: %d, want 303", i+1, rec.Code)
				}
			}
			one.clock.Advance(time.Minute)
			if rec := signInFrom(two, "admin1", testPassword, "10.0.0.1", nil); rec.Code != http.StatusSeeOther {
				t.Fatalf("server 2 after the block: %d, want 303", rec.Code)
			}
			// The success on server 2 cleared the pair for server 1 too:
			// four more failures there block nothing.
			for i := range 4 {
				if rec := signInFrom(one, "admin1", "wrong-password", "10.0.0.1", nil); strings.Contains(rec.Body.String(), "wait") {
					t.Fatalf("wrong password %d after the success: told to wait", i+1)
				}
			}
		})
	}
}

// secondServer opens e's database (at where) a second time and serves it
// with a second server on the same clock.
func secondServer(t *testing.T, e *testEnv, where string) *testEnv {
	t.Helper()
	db, err := store.Open(where)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	srv, err := NewServer(Config{DB: db, Now: e.clock.Now, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	two := *e
	two.db, two.srv, two.h = db, srv, srv.Handler()
	return &two
}
