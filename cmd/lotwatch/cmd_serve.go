package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/signal"
	"strings"
	"syscall"
	"time"

	"lotwatch/store"
	"lotwatch/web"
	"lotwatch/web/alert"
	"lotwatch/web/metrics"
)

func init() {
	register(command{
		name:    "serve",
		summary: "serve the pages and the JSON API for inspection stations",
		run:     runServe,
	})
}

func runServe(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("serve")
	dbPath := fs.String("db", "", "database `file`, or a postgres:// URL (required)")
	readDB := fs.String("read-db", "", readDBHelp)
	addr := fs.String("addr", "127.0.0.1:8080", "listen `address` (host:port)")
	cert := fs.String("cert", "", "TLS certificate `file` (PEM); with --key, serve HTTPS")
	key := fs.String("key", "", "TLS private key `file` (PEM)")
	secure := fs.Bool("behind-tls", false, "the server is reached over HTTPS through a proxy: mark cookies Secure and send HSTS")
	proxies := fs.String("proxy-addr", "", "comma-separated `addresses` (or CIDR ranges) of the reverse proxies in front of the server;\nonly from them is X-Forwarded-For believed for the client's address")
	publicURL := fs.String("public-url", "", "the server's `URL` as people reach it, for the links in alerts (default http://ADDR)")
	smtpAddr := fs.String("smtp-addr", "", "SMTP server `HOST:PORT` for e-mail alerts (STARTTLS when offered)")
	smtpFrom := fs.String("smtp-from", "", "sender `address` of e-mail alerts")
	smtpCreds := fs.String("smtp-credentials", "", "`file` with the SMTP user name on its first line and the password on its second\n(or LOTWATCH_SMTP_USER and LOTWATCH_SMTP_PASSWORD in the environment)")
	metricsAddr := fs.String("metrics-addr", "", "serve Prometheus metrics at http://`HOST:PORT`/metrics, a listener of its own apart\nfrom the public one (no sign-in: keep it on a private address)")
	help := cliHelp(fs, `Usage: lotwatch serve --db FILE [--addr 127.0.0.1:8080] [--cert FILE --key FILE] [--proxy-addr LIST]
                      [--public-url URL] [--smtp-addr HOST:PORT --smtp-from ADDR] [--metrics-addr HOST:PORT]
                      [--read-db URL]

Serves the pages (sign-in, processes, control charts) and the JSON API under
/api/v1/ until interrupted (SIGINT or SIGTERM); requests in flight are
finished and the database closed cleanly before it exits.

Failed sign-ins are throttled per user name and client address, and per
address. Behind a reverse proxy every request comes from the proxy's
address: name the proxy with --proxy-addr so that the client's address is
read from the X-Forwarded-For header the proxy adds (the header is ignored
from any other address, since anyone can send it).

On PostgreSQL, --read-db takes the reading of lots for charts, the board
and reviews off the primary onto one of its streaming replicas. A replica
answers for a process only once it has replayed that process's latest
change, so a chart never shows less than the primary holds; sign-ins,
causes and every write stay on the primary.

Options:
`, "\n"+caution)
	pos, code, done := cliParse(fs, args, help, stdout, stderr)
	if done {
		return code
	}
	if len(pos) > 0 {
		return cliProblems(stderr, "serve", cliNoArgs(pos)...)
	}
	if *dbPath == "" {
		fmt.Fprintln(stderr, "lotwatch serve: --db FILE is required")
		return exitUsage
	}
	if (*cert == "") != (*key == "") {
		fmt.Fprintln(stderr, "lotwatch serve: give both --cert and --key, or neither")
		return exitUsage
	}
	for _, f := range []string{*cert, *key} {
		if f == "" {
			continue
		}
		if _, err := os.Stat(f); err != nil {
			fmt.Fprintf(stderr, "lotwatch serve: %v\n", err)
			return exitUsage
		}
	}
	trusted, err := web.ParseProxies(*proxies)
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch serve: --proxy-addr: %v\n", err)
		return exitUsage
	}
	if _, err := os.Stat(*dbPath); err != nil && !store.IsURL(*dbPath) {
		fmt.Fprintf(stderr, "lotwatch serve: database %s: %v (create it first, e.g. with `lotwatch demo`)\n", *dbPath, err)
		return exitUsage
	}
	alerts, problem := serveAlerts(*publicURL, *smtpAddr, *smtpFrom, *smtpCreds)
	if problem != "" {
		fmt.Fprintf(stderr, "lotwatch serve: %s\n", problem)
		return exitUsage
	}
	logger := slog.New(slog.NewTextHandler(stderr, nil))
	db, err := store.Open(*dbPath)
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch serve: %v\n", err)
		if errors.Is(err, store.ErrBadURL) {
			return exitUsage
		}
		return exitFail
	}
	if code, ok := cliReplica(stderr, "serve", db, *readDB); !ok {
		db.Close()
		return code
	}
	if db.ReadOnly() {
		logger.Warn("the database cannot be written: serving it read-only (pages and charts work, every change is refused)", "db", *dbPath)
	}
	cfg := web.Config{DB: db, Addr: *addr, CertFile: *cert, KeyFile: *key, Secure: *secure, TrustedProxies: trusted, Logger: logger, Alerts: alerts}
	var m *metrics.Metrics
	if *metricsAddr != "" {
		m = metrics.New(db, logger)
		cfg.Observer = m
	}
	srv, err := web.NewServer(cfg)
	if err != nil {
		db.Close()
		fmt.Fprintf(stderr, "lotwatch serve: %v\n", err)
		return exitUsage
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	if m != nil {
		m.Watch(srv, logger)
		stopMetrics, err := serveMetrics(ctx, *metricsAddr, m, logger)
		if err != nil {
			db.Close()
			fmt.Fprintf(stderr, "lotwatch serve: --metrics-addr: %v\n", err)
			return exitUsage
		}
		defer stopMetrics()
	}
	serveErr := srv.ListenAndServe(ctx)
	// Shutdown has waited for every request in flight; only now close the
	// database, so that no acknowledged write is lost.
	closeErr := db.Close()
	if serveErr != nil {
		fmt.Fprintf(stderr, "lotwatch serve: %v\n", serveErr)
		return exitFail
	}
	if closeErr != nil {
		fmt.Fprintf(stderr, "lotwatch serve: closing the database: %v\n", closeErr)
		return exitFail
	}
	return exitOK
}

// serveAlerts reads the alert options of serve; problem is one line
// naming the option and value when one is bad. SMTP credentials come from
// a file or the environment, never from an option (options are visible
// to every user of the machine).
func serveAlerts(publicURL, smtpAddr, smtpFrom, credFile string) (web.AlertsConfig, string) {
	var cfg web.AlertsConfig
	if publicURL != "" {
		u, err := url.Parse(publicURL)
		if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
			return cfg, fmt.Sprintf("--public-url %q: want an http or https URL such as https://lotwatch.plant.example", publicURL)
		}
		cfg.PublicURL = publicURL
	}
	if smtpAddr == "" {
		if smtpFrom != "" || credFile != "" {
			return cfg, "--smtp-from and --smtp-credentials need --smtp-addr HOST:PORT"
		}
		return cfg, ""
	}
	mc := alert.MailConfig{Addr: smtpAddr, From: smtpFrom, User: os.Getenv("LOTWATCH_SMTP_USER"), Password: os.Getenv("LOTWATCH_SMTP_PASSWORD")}
	if credFile != "" {
		b, err := os.ReadFile(credFile)
		if err != nil {
			return cfg, fmt.Sprintf("--smtp-credentials %q: %v", credFile, err)
		}
		lines := strings.Split(strings.ReplaceAll(string(b), "\r\n", "\n"), "\n")
		if len(lines) < 2 || lines[0] == "" {
			return cfg, fmt.Sprintf("--smtp-credentials %q: want the user name on the first line and the password on the second", credFile)
		}
		mc.User, mc.Password = lines[0], lines[1]
	}
	m, err := alert.NewMailer(mc)
	if err != nil {
		return cfg, err.Error()
	}
	cfg.Mail = m
	return cfg, ""
}

// serveMetrics serves the metrics on their own listener until ctx ends;
// the returned function stops it.
func serveMetrics(ctx context.Context, addr string, m *metrics.Metrics, log *slog.Logger) (func(), error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, err
	}
	hs := &http.Server{Handler: m.Handler(), ReadHeaderTimeout: 10 * time.Second, WriteTimeout: 60 * time.Second}
	go hs.Serve(ln)
	log.Info("lotwatch metrics", "url", "http://"+ln.Addr().String()+"/metrics")
	go func() {
		<-ctx.Done()
		hs.Close()
	}()
	return func() { hs.Close() }, nil
}
