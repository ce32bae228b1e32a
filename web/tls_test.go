package web

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"io"
	"log/slog"
	"math/big"
	"net"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// selfSigned writes a certificate and key for 127.0.0.1 into dir.
func selfSigned(t *testing.T, dir string) (certFile, keyFile string, pool *x509.CertPool) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "lotwatch test"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}, KeyUsage: x509.KeyUsageDigitalSignature,
		ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kb, err := x509.MarshalECPrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600)
	os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb}), 0o600)
	c, _ := x509.ParseCertificate(der)
	pool = x509.NewCertPool()
	pool.AddCert(c)
	return certFile, keyFile, pool
}

// TestServeTLS serves over HTTPS from a certificate and key: plain HTTP is
// not answered, the session cookie is Secure (and __Host- prefixed), and
// HSTS is sent (RFC 6265bis cookie prefixes; RFC 6797).
func TestServeTLS(t *testing.T) {
	e := newTestEnv(t)
	certFile, keyFile, pool := selfSigned(t, t.TempDir())
	srv, err := NewServer(Config{DB: e.db, CertFile: certFile, KeyFile: keyFile, Now: e.clock.Now,
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ctx, ln) }()
	defer func() {
		cancel()
		if err := <-done; err != nil {
			t.Errorf("Serve: %v", err)
		}
	}()
	client := &http.Client{
		Transport:     &http.Transport{TLSClientConfig: &tls.Config{RootCAs: pool}},
		CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse },
		Timeout:       10 * time.Second,
	}
	base := "https://" + ln.Addr().String()
	res, err := client.Get(base + "/healthz")
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode != 200 || !strings.Contains(res.Header.Get("Strict-Transport-Security"), "max-age=") {
		t.Errorf("healthz over TLS: %d, HSTS %q", res.StatusCode, res.Header.Get("Strict-Transport-Security"))
	}
	if res, err := (&http.Client{Timeout: 5 * time.Second}).Get("http://" + ln.Addr().String() + "/healthz"); err == nil {
		if res.StatusCode == 200 {
			t.Error("plain HTTP answered 200 on the TLS port")
		}
		res.Body.Close()
	}
	form := url.Values{"name": {"viewer1"}, "password": {testPassword}}
	rq, _ := http.NewRequest("POST", base+"/signin", strings.NewReader(form.Encode()))
	rq.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	rq.Header.Set("Sec-Fetch-Site", "same-origin")
	res, err = client.Do(rq)
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode != http.StatusSeeOther {
		t.Fatalf("sign-in over TLS: %d", res.StatusCode)
	}
	var session *http.Cookie
	for _, c := range res.Cookies() {
		if c.HttpOnly && c.Value != "" {
			session = c
		}
	}
	if session == nil || !session.Secure || !strings.HasPrefix(session.Name, "__Host-") {
		t.Errorf("session cookie over TLS: %+v, want Secure, HttpOnly and __Host-", session)
	}
}
