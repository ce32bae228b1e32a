package web

import (
	"context"
	"net/http"
	"time"

	"github.com/go-chi/chi/v5/middleware"
)

// Observer is told what the server does, for the plant's monitoring
// (web/metrics turns it into Prometheus metrics). Its methods must return
// quickly; the server never waits on monitoring.
type Observer interface {
	// LotsAccepted counts lots answered as stored through a source
	// ("api", "form" or "upload"); a retry of a stored lot counts again.
	LotsAccepted(source string, n int)
	// LotsRefused counts requests of a source that posted lots and were
	// refused (bad input, a conflict, a role too low); nothing was stored.
	LotsRefused(source string)
	// Request times one answered request by its route pattern.
	Request(method, route string, status int, d time.Duration)
}

// nopObserver observes nothing.
type nopObserver struct{}

func (nopObserver) LotsAccepted(string, int)                   {}
func (nopObserver) LotsRefused(string)                         {}
func (nopObserver) Request(string, string, int, time.Duration) {}

// lotSources are the routes that store lots, by the source they stand for.
var lotSources = map[string]string{
	"POST /api/v1/processes/{id}/lots": "api",
	"POST /processes/{id}/lots":        "form",
	"POST /upload/{key}":               "upload",
}

// observed times every request of the route and counts the refused posts
// of lots.
func (s *Server) observed(rt route, h http.Handler) http.Handler {
	source := lotSources[rt.method+" "+rt.pattern]
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		start := time.Now()
		ww := middleware.NewWrapResponseWriter(w, r.ProtoMajor)
		h.ServeHTTP(ww, r)
		status := ww.Status()
		if status == 0 {
			status = http.StatusOK
		}
		s.obs.Request(rt.method, rt.pattern, status, time.Since(start))
		if source != "" && status >= 400 && status < 500 {
			s.obs.LotsRefused(source)
		}
	})
}

// SignalCounts counts the signals on the charts of the active processes
// by kind (attention.Kind: out_of_limits, run_rule, shift), explained or
// not: what monitoring graphs beside the lots needing attention.
func (s *Server) SignalCounts(ctx context.Context) (map[string]int, error) {
	pps, err := s.plant(ctx)
	if err != nil {
		return nil, err
	}
	out := map[string]int{}
	for _, pp := range pps {
		if pp.err != nil {
			return nil, pp.err
		}
		for _, sg := range pp.sum.flagged.Signals {
			out[string(sg.Kind)]++
		}
	}
	return out, nil
}
