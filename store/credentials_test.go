package store

import (
	"strings"
	"testing"
)

// The audit trail states each password and token hash (as the SHA-256 of
// the stored hash), so that a hash copied or replaced with plain SQL is
// named by verify: the probe of issue 12 copied a viewer's password hash
// onto admin, verify passed, and the viewer's password then signed in as
// admin. A password set through lotwatch is stated anew and verify holds.
func TestAuditCoversCredentials(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, path := open(t)
		if _, err := db.AddUser(ctx, "t", "ana", RoleAdmin, "admin-password-1"); err != nil {
			t.Fatal(err)
		}
		if _, err := db.AddUser(ctx, "t", "bo", RoleViewer, "viewer-password-1"); err != nil {
			t.Fatal(err)
		}
		if _, _, err := db.CreateToken(ctx, "t", "bo", "station"); err != nil {
			t.Fatal(err)
		}
		if err := db.SetPassword(ctx, "t", "bo", "viewer-password-2"); err != nil {
			t.Fatal(err)
		}
		if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
			t.Fatalf("untouched: %+v %v", chk, err)
		}
		raw := rawSQL(t, path)
		if _, err := raw.Exec("UPDATE users SET password_hash = (SELECT password_hash FROM users WHERE name = 'bo') WHERE name = 'ana'"); err != nil {
			t.Fatal(err)
		}
		chk, err := db.VerifyAudit(ctx)
		if err != nil || chk.OK || !strings.Contains(chk.Why, `user 1 ("ana"): its password hash differs from the audit trail`) {
			t.Fatalf("copied password hash: %+v %v", chk, err)
		}
	})
}

// A database written before the trail stated credentials (the schema-1
// fixture) still verifies; the upgrade states every password and token
// hash once, so that a hash copied afterwards is named too.
//
// SQLite only: upgrades a file written before migration 0005 (Go upgrades exist for SQLite files only).
func TestCredentialsUpgrade(t *testing.T) {
	path := fixtureCopy(t)
	if chk := verifyFile(t, path); !chk.OK {
		t.Fatalf("upgraded fixture: %+v", chk)
	}
	raw := rawSQL(t, path)
	if _, err := raw.Exec("UPDATE users SET password_hash = (SELECT password_hash FROM users WHERE name = 'bo') WHERE name = 'ana'"); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	if chk := verifyFile(t, path); chk.OK || !strings.Contains(chk.Why, `("ana"): its password hash differs`) {
		t.Fatalf("copied password hash after the upgrade: %+v", chk)
	}
}
