// Package web is lotwatch's HTTP server: sign-in with server-side
// sessions, roles checked on every route from one table, CSRF defence,
// the JSON API under /api/v1/ for inspection stations, and the pages,
// whose control charts are drawn by ECharts served from the binary itself
// (no page loads anything from another origin).
//
// Security choices:
//   - Sessions: a random id (store.CreateSession) in an HttpOnly,
//     SameSite=Lax cookie (Secure and __Host- prefixed under TLS); it
//     ends after SessionIdle (30 min) without a request and SessionAbsolute
//     (12 h) after sign-in. Each sign-in issues a new id and ends the
//     browser's previous session; a password change ends all the user's
//     sessions and gives this browser a new one. Noting a session as seen
//     is best effort, and a session begun on a full disk is kept in
//     memory until the server stops, so that pages stay readable there.
//   - Roles: the least role of each route is in Server.routes and checked
//     by Server.guard, nowhere else.
//   - CSRF: http.CrossOriginProtection refuses cross-origin POSTs (by
//     Sec-Fetch-Site, else Origin against Host), on top of SameSite
//     cookies. Bearer-token API calls carry no ambient credentials.
//   - Sign-in: after 5 failed attempts within a minute for one user name
//     from one client address, or 20 from one address, further attempts
//     from there get 429 with Retry-After for 1 minute, doubling on each
//     repeat up to 15 minutes; a name is never locked for everyone.
//     Successful sign-ins are not counted. The client address is
//     RemoteAddr, or, from a proxy in Config.TrustedProxies (serve
//     --proxy-addr), the nearest untrusted X-Forwarded-For hop. Names
//     over 64 bytes are refused before they are counted or logged. The
//     failures are counted in the database (store.RecordSignInFailure),
//     so every server on one database holds a client to the same count;
//     a read-only database, or one that cannot take the write, counts in
//     the server's memory.
//   - Every page goes through html/template; the chart options travel as a
//     JSON data block read by /static/charts.js, so the Content-Security-
//     Policy forbids inline scripts and styles.
//
// Pages (server-rendered; least role in brackets):
//
//	/                               status board: every active process, today's lots and signals, open causes (viewer)
//	/processes/{id}                 control chart; period=today|shift|7d|30d|all|custom (from, to), by=lot|shift|day (viewer)
//	/processes/{id}/chart.csv       the chart's points as CSV (viewer)
//	/log, /processes/{id}/log       log a lot; saving shows its verdict on the chart at once (inspector)
//	/lots/{lot}                     a lot: verdict, assignable causes, correction, void, history and audit (viewer; changes inspector)
//	/processes/{id}/limits          baseline, trial limits, exclusions with reasons, freeze (engineer)
//	/settings/processes, /processes/{id}/settings   add and edit processes (engineer)
//	/upload                         CSV upload: preview with line-numbered problems, import on confirmation (inspector)
//	/review?week=2026-W48, /plan    weekly review (downloads as HTML, CSV, JSON) and lot-size planning (viewer)
//	/admin/users                    users and API tokens (admin)
//
// A chart of more than 2,000 points is drawn as at most 2,000, however
// long its signals: per stretch of consecutive points the lowest and the
// highest, the one furthest outside its limits and the first in a signal,
// each drawn point's tooltip counting the stretch's points outside their
// limits and in a signal; the page says so, and its table and CSV keep
// every point. An
// uploaded file waits on the server (a temporary file under a random key
// bound to the session) between the preview and the confirmation, so that
// the bytes imported are the bytes checked. A user keeps at most 3
// previews (the oldest gives way) and the server 50; they are removed
// when the server stops, and those of a server that is gone when the next
// one starts.
//
// API (JSON; errors are {"error": "..."} with "problems" for bad lots,
// the first 100 of them, and "more" counting the rest):
//
//	GET  /api/v1/me                         who the token or session is
//	GET  /api/v1/processes                  [{"id","name","chart",...}]
//	GET  /api/v1/processes/{id}             one process
//	GET  /api/v1/processes/{id}/chart       the analyze JSON shape (chartjson.Chart), in pages of
//	                                        limit= lots (at most and by default 10,000) with
//	                                        "total" and the "next" page's cursor=
//	GET  /api/v1/processes/{id}/lots        stored lots
//	POST /api/v1/processes/{id}/lots        log lots (inspector+)
//	GET  /api/v1/processes/{id}/signals     run-rule signals with annotations
//	GET  /api/v1/processes/{id}/limits      frozen limit sets
//	GET  /api/v1/attention                  lots needing attention, oldest first
//	POST /api/v1/processes/{id}/lots/{lot}/causes  a cause or "no cause found" (inspector+)
//	GET  /api/v1/users                      users (admin)
//
// from= and to= take an RFC 3339 time or a date (YYYY-MM-DD, in the
// process's time zone; "to" then means the end of that day), both ends
// inclusive. A lot posted again with identical values is not stored twice:
// the answer is 201 with the stored lot (same id). A lot posted without a
// time gets the time of the commit, and re-posting it without a time is
// still identical.
package web
