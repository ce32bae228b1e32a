package main

import (
	"io"
	"lotwatch/store/storetest"
	"net/http"
	"net/url"
	"os/exec"
	"strconv"
	"strings"
	"testing"
)

// TestTwoServersShareSignInLimits runs two `lotwatch serve` on one
// PostgreSQL database: five bad passwords for a name, sent from one
// address to the two servers in turn, block the name from that address
// on both (429 with the same kind of Retry-After), as one server alone
// would; another name from the address still signs in. With the counts
// kept by each server for itself neither server would have seen five.
func TestTwoServersShareSignInLimits(t *testing.T) {
	pg := storetest.PostgresSchema(t)
	bin := buildLotwatch(t)
	for _, name := range []string{"eve", "ana"} {
		args := []string{"user", "add", "--db", pg, "--name", name, "--role", "viewer", "--as", "t"}
		if code, out := lotwatchCmd(t, bin, "shared-limits-pass\n", args...); code != exitOK {
			t.Fatalf("%v: %d %s", args, code, out)
		}
	}
	var bases []string
	for range 2 {
		addr := freeAddr(t)
		srv := exec.Command(bin, "serve", "--db", pg, "--addr", addr)
		var log strings.Builder
		srv.Stdout, srv.Stderr = &log, &log
		if err := srv.Start(); err != nil {
			t.Fatal(err)
		}
		defer srv.Process.Kill()
		waitHealthy(t, "http://"+addr, srv)
		bases = append(bases, "http://"+addr)
	}
	signIn := func(base, name, password string) (int, string, string) {
		t.Helper()
		form := url.Values{"name": {name}, "password": {password}}.Encode()
		res, err := noRedirect.Post(base+"/signin", "application/x-www-form-urlencoded", strings.NewReader(form))
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		b, _ := io.ReadAll(res.Body)
		return res.StatusCode, res.Header.Get("Retry-After"), string(b)
	}
	for i := range 5 {
		base := bases[i%2]
		code, _, body := signIn(base, "eve", "wrong-password")
		if code != http.StatusUnauthorized {
			t.Fatalf("wrong password %d to %s: %d, want 401", i+1, base, code)
		}
		if told := strings.Contains(body, "Too many failed attempts"); told != (i == 4) {
			t.Errorf("wrong password %d to %s: told to wait: %v, want %v", i+1, base, told, i == 4)
		}
	}
	for _, base := range bases {
		code, after, _ := signIn(base, "eve", "shared-limits-pass")
		if s, err := strconv.Atoi(after); code != http.StatusTooManyRequests || err != nil || s < 1 || s > 60 {
			t.Errorf("%s, the right password after five failures over both servers: %d Retry-After %q, want 429 and 1 to 60 seconds", base, code, after)
		}
		if code, _, _ := signIn(base, "ana", "shared-limits-pass"); code != http.StatusSeeOther {
			t.Errorf("%s, another name from the same address: %d, want 303", base, code)
		}
	}
}
