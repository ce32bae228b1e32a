// Package web is lotwatch's HTTP server: sign-in with server-side
// sessions, roles checked on every route from one table, CSRF defence,
// the JSON API under /api/v1/ for inspection stations, and the pages,
// whose control charts are drawn by ECharts served from the binary itself
// (no page loads anything from another origin).
package web
