package web

import (
	"context"
	"net"
	"net/http"
	"strings"
	"testing"
	"time"

	"lotwatch/store"
)

// TestServeShutsDownGracefully: a lot posted just before the context ends
// is answered and stored; Serve then returns without error.
func TestServeShutsDownGracefully(t *testing.T) {
	e := newTestEnv(t)
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- e.srv.Serve(ctx, ln) }()
	url := "http://" + ln.Addr().String() + lotsPath(e)
	r, _ := http.NewRequest("POST", url, strings.NewReader(`{"lot":"G1","inspected":50,"defective":1}`))
	r.Header.Set("Authorization", "Bearer "+e.tokens[store.RoleInspector])
	res, err := http.DefaultClient.Do(r)
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Fatalf("Serve: %v", err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Serve did not return after the context ended")
	}
	if res.StatusCode != http.StatusCreated || e.lotCount(t) != 1 {
		t.Fatalf("status %d, %d lots stored", res.StatusCode, e.lotCount(t))
	}
	if _, err := http.Get("http://" + ln.Addr().String() + "/healthz"); err == nil {
		t.Error("server still answers after shutdown")
	}
}

func TestNewServerChecksConfig(t *testing.T) {
	if _, err := NewServer(Config{}); err == nil {
		t.Error("no database accepted")
	}
	e := newTestEnv(t)
	if _, err := NewServer(Config{DB: e.db, CertFile: "cert.pem"}); err == nil {
		t.Error("a certificate without a key accepted")
	}
}
