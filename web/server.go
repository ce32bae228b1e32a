package web

import (
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"net/netip"
	"time"

	"lotwatch/store"
	"lotwatch/web/alert"
)

// Session lifetimes. A session ends after 30 minutes without a request
// (a terminal left signed in on the shop floor) and 12 hours after
// sign-in whatever happens (one shift and some); common practice, no
// source.
const (
	SessionIdle     = 30 * time.Minute
	SessionAbsolute = 12 * time.Hour
)

// Config configures a Server.
type Config struct {
	DB   *store.DB
	Addr string // listen address for ListenAndServe; default 127.0.0.1:8080

	// CertFile and KeyFile, when both are set, make ListenAndServe serve
	// HTTPS; the session cookie is then Secure and HSTS is sent.
	CertFile, KeyFile string

	// Secure marks the server as reached over HTTPS even without a
	// certificate of its own (behind a TLS-terminating proxy).
	Secure bool

	// TrustedProxies are the addresses of the reverse proxies in front of
	// the server; only from them is X-Forwarded-For believed for the
	// client address (sign-in throttling and the log).
	TrustedProxies []netip.Prefix

	// Alerts configures the delivery of alerts (see AlertsConfig).
	Alerts AlertsConfig
	// Observer is told what the server does, for monitoring; nil
	// observes nothing.
	Observer Observer

	Logger *slog.Logger     // default: slog.Default()
	Now    func() time.Time // default: time.Now; tests set a fake clock
}

// Server is the lotwatch web server.
type Server struct {
	db        *store.DB
	addr      string
	cert      string
	key       string
	secure    bool
	log       *slog.Logger
	now       func() time.Time
	gate      *signInGate
	pages     *pageSet
	judges    judgeGroup
	summaries summaryCache
	uploads   *uploads
	handler   http.Handler

	alerts    *alert.Worker
	publicURL string
	obs       Observer
}

// NewServer checks the configuration and builds the server.
func NewServer(cfg Config) (*Server, error) {
	if cfg.DB == nil {
		return nil, errors.New("web: Config.DB is nil")
	}
	if (cfg.CertFile == "") != (cfg.KeyFile == "") {
		return nil, errors.New("web: give both a certificate file and a key file, or neither")
	}
	s := &Server{
		db:     cfg.DB,
		addr:   cfg.Addr,
		cert:   cfg.CertFile,
		key:    cfg.KeyFile,
		secure: cfg.Secure || cfg.CertFile != "",
		log:    cfg.Logger,
		now:    cfg.Now,
		obs:    cfg.Observer,
	}
	if s.obs == nil {
		s.obs = nopObserver{}
	}
	if s.addr == "" {
		s.addr = "127.0.0.1:8080"
	}
	if s.log == nil {
		s.log = slog.Default()
	}
	if s.now == nil {
		s.now = time.Now
	}
	s.gate = newSignInGate(cfg.DB, s.now, s.log, cfg.TrustedProxies)
	uploads, err := newUploads()
	if err != nil {
		return nil, err
	}
	s.uploads = uploads
	pages, err := loadPages()
	if err != nil {
		return nil, err
	}
	s.pages = pages
	if s.alerts, err = s.newAlertWorker(cfg.Alerts); err != nil {
		return nil, err
	}
	s.handler = s.buildHandler()
	return s, nil
}

// Handler returns the server's HTTP handler: security headers, the
// cross-origin guard, then the routes with their role checks.
func (s *Server) Handler() http.Handler { return s.handler }

// ListenAndServe serves until ctx ends, then shuts down gracefully:
// it stops accepting connections and waits (up to 30 seconds) for the
// requests in flight, so that no acknowledged write is lost. It does not
// close the database; the caller does, after ListenAndServe returns.
func (s *Server) ListenAndServe(ctx context.Context) error {
	ln, err := net.Listen("tcp", s.addr)
	if err != nil {
		return fmt.Errorf("web: listen on %s: %w", s.addr, err)
	}
	return s.Serve(ctx, ln)
}

// Serve is ListenAndServe on a listener the caller opened. Uploads
// waiting for confirmation are removed when it returns: they belong to
// sessions of this run.
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	defer s.uploads.removeAll()
	hs := &http.Server{
		Handler:           s.handler,
		ReadHeaderTimeout: 10 * time.Second,
		ReadTimeout:       60 * time.Second,
		WriteTimeout:      120 * time.Second,
		IdleTimeout:       120 * time.Second,
		MaxHeaderBytes:    64 << 10,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
		BaseContext:       func(net.Listener) context.Context { return context.WithoutCancel(ctx) },
	}
	if s.cert != "" {
		hs.TLSConfig = &tls.Config{MinVersion: tls.VersionTLS12}
	}
	// Alerts are delivered while the server runs, and stopped only after
	// the requests in flight are finished.
	actx, stopAlerts := context.WithCancel(context.WithoutCancel(ctx))
	alertsDone := make(chan struct{})
	go func() { defer close(alertsDone); s.alerts.Run(actx) }()
	defer func() { stopAlerts(); <-alertsDone }()
	warmCtx, stopWarm := context.WithCancel(context.WithoutCancel(ctx))
	warmDone := make(chan struct{})
	go func() { defer close(warmDone); s.warmUp(warmCtx) }()
	defer func() { stopWarm(); <-warmDone }()
	errc := make(chan error, 1)
	go func() {
		if s.cert != "" {
			errc <- hs.ServeTLS(ln, s.cert, s.key)
		} else {
			errc <- hs.Serve(ln)
		}
	}()
	scheme := "http"
	if s.cert != "" {
		scheme = "https"
	}
	s.log.Info("lotwatch serving", "url", scheme+"://"+ln.Addr().String())
	select {
	case err := <-errc:
		return fmt.Errorf("web: serve: %w", err)
	case <-ctx.Done():
	}
	s.log.Info("lotwatch shutting down: finishing requests in flight")
	sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := hs.Shutdown(sctx); err != nil {
		return fmt.Errorf("web: shutdown: %w", err)
	}
	if err := <-errc; err != nil && !errors.Is(err, http.ErrServerClosed) {
		return fmt.Errorf("web: serve: %w", err)
	}
	return nil
}
