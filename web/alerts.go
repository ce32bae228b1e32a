package web

import (
	"context"
	"errors"
	"fmt"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"lotwatch/store"
	"lotwatch/web/alert"
	"lotwatch/web/attention"
)

// AlertsConfig configures the delivery of alerts by a Server.
type AlertsConfig struct {
	// PublicURL is the server's address as people reach it (links in
	// alerts); default: http://ADDR.
	PublicURL string
	Mail      *alert.Mailer // nil: no e-mail
	// Owner names this server in the claims on the outbox (see
	// alert.Config); default: the listen address.
	Owner string
	Poll  time.Duration // default 1 s
	// RetryBase is the first wait before a retry (default 5 s; tests
	// shorten it).
	RetryBase time.Duration
	// EscalateEvery is how often unexplained lots are looked for
	// (default 30 s; tests shorten it).
	EscalateEvery time.Duration
}

// newAlertWorker builds the worker that delivers the alerts, judging with
// the chart's own judging (judgeLots).
func (s *Server) newAlertWorker(cfg AlertsConfig) (*alert.Worker, error) {
	if cfg.PublicURL == "" {
		scheme := "http"
		if s.cert != "" {
			scheme = "https"
		}
		cfg.PublicURL = scheme + "://" + s.addr
	}
	if cfg.Owner == "" {
		cfg.Owner = "serve " + s.addr
	}
	s.publicURL = strings.TrimRight(cfg.PublicURL, "/")
	return alert.NewWorker(alert.Config{DB: s.db, Judge: s.judgeLots, Attention: s.lotsNeedingAttention, EscalateEvery: cfg.EscalateEvery, Now: s.now, PublicURL: s.publicURL, Mail: cfg.Mail,
		Log: s.log, Owner: cfg.Owner, Poll: cfg.Poll, RetryBase: cfg.RetryBase})
}

// RunAlerts delivers alerts until ctx ends (Serve runs it; tests that
// use Handler start it themselves).
func (s *Server) RunAlerts(ctx context.Context) { s.alerts.Run(ctx) }

// judgeLots is the alert.Judge of the server: the lots' points on the
// process's chart as the chart page shows it (the whole record against
// the limit sets): out of limits, and the signals of the kind the
// attention model gives them (attention.SignalKind: run_rule, or shift for
// the small-shift monitors). A signal is the lot's when the lot starts it
// (completes its pattern, spc.Signal.Start); the lots after it that keep
// the pattern going only extend it (Verdict.Extends), so that a run of 30
// lots above the centre line is one alert, not 23.
func (s *Server) judgeLots(ctx context.Context, p store.Process, ids []int64) (map[int64]alert.Verdict, error) {
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		return nil, err
	}
	out := map[int64]alert.Verdict{}
	if pc.a == nil {
		return out, nil
	}
	want := make(map[int64]bool, len(ids))
	for _, id := range ids {
		want[id] = true
	}
	at := map[int]int64{}
	for i, l := range pc.lots {
		if !want[l.ID] {
			continue
		}
		pt := pc.a.Points[i]
		v := alert.Verdict{Lot: l, Value: pt.Value, UCL: pt.UCL, LCL: pt.LCL}
		switch {
		case pt.Above:
			v.Kinds, v.Words = append(v.Kinds, store.TriggerOutOfLimits), "above the upper control limit"
		case pt.Below:
			v.Kinds, v.Words = append(v.Kinds, store.TriggerOutOfLimits), "below the lower control limit"
		}
		out[l.ID] = v
		at[i] = l.ID
	}
	for _, sg := range pc.a.Signals {
		k := string(attention.SignalKind(sg.Rule))
		for i := max(sg.First, sg.Start); i <= sg.Last; i++ {
			id, ok := at[i]
			if !ok {
				continue
			}
			v := out[id]
			switch {
			case k == store.TriggerOutOfLimits:
				// A lot beyond a limit alerts by itself (above); the
				// rule is named on each such lot.
				if hasString(v.Kinds, k) {
					v.Rules = append(v.Rules, sg.Rule.String())
				}
			case i == sg.Start:
				v.Rules = append(v.Rules, sg.Rule.String())
				if !hasString(v.Kinds, k) {
					v.Kinds = append(v.Kinds, k)
				}
				v.Words = joinWords(v.Words, sg.Description)
			default:
				v.ExtendRules = append(v.ExtendRules, sg.Rule.String())
				if !hasString(v.Extends, k) {
					v.Extends = append(v.Extends, k)
				}
				v.ExtendWords = joinWords(v.ExtendWords, "extends: "+sg.Description)
			}
			out[id] = v
		}
	}
	for id, v := range out {
		if v.Words == "" {
			v.Words = alert.WithinLimits
			out[id] = v
		}
	}
	return out, nil
}

// lotsNeedingAttention is the attention.Find of the process's chart as
// the board and GET /api/v1/attention show it: the ids of its lots out of
// limits or in a signal that nobody has explained.
func (s *Server) lotsNeedingAttention(ctx context.Context, p store.Process) ([]int64, error) {
	pc, err := s.freshChart(ctx, p)
	if err != nil {
		return nil, err
	}
	anns, err := s.db.Annotations(ctx, p.ID)
	if err != nil {
		return nil, err
	}
	var ids []int64
	for _, l := range attention.Find(p, pc.lots, pc.a, anns) {
		ids = append(ids, l.LotID)
	}
	return ids, nil
}

func hasString(ss []string, s string) bool {
	for _, x := range ss {
		if x == s {
			return true
		}
	}
	return false
}

func joinWords(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}

// alertRow is a rule as the alerts page shows it.
type alertRow struct {
	Rule       store.AlertRule
	Deliveries []deliveryRow
}

// deliveryRow is one message with its attempts.
type deliveryRow struct {
	D        store.Delivery
	Attempts []store.Attempt
}

type alertsData struct {
	Rules     []alertRow
	Processes []store.Process
	Triggers  []string
	Values    map[string]string
	On        map[string]bool
	Problems  []string
	Done      string
	Failed    int
	Pending   int
	PublicURL string
	Hosts     []string // the plant's webhook hosts; empty: any host
}

// alertsPage lists the alert rules with their latest messages and every
// attempt, and the form to add a rule.
func (s *Server) alertsPage(w http.ResponseWriter, r *http.Request) {
	s.showAlerts(w, r, http.StatusOK, map[string]string{}, nil, nil)
}

// deliveriesShown is how many of a rule's latest messages the page lists.
const deliveriesShown = 20

func (s *Server) showAlerts(w http.ResponseWriter, r *http.Request, status int, vals map[string]string, on map[string]bool, problems []string) {
	ctx := r.Context()
	rules, err := s.db.AlertRules(ctx)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	ps, err := s.db.Processes(ctx, false)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	counts, err := s.db.DeliveryCounts(ctx)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	hosts, err := s.db.WebhookHosts(ctx)
	if err != nil {
		s.internalError(w, r, err)
		return
	}
	if on == nil {
		on = map[string]bool{}
		for _, t := range store.DefaultTriggers {
			on[t] = true
		}
	}
	d := alertsData{Processes: ps, Triggers: store.Triggers, Values: vals, On: on, Problems: problems,
		Done: r.URL.Query().Get("done"), Failed: counts[store.DeliveryFailed], Pending: counts[store.DeliveryPending], PublicURL: s.publicURL, Hosts: hosts}
	for _, rule := range rules {
		row := alertRow{Rule: rule}
		ds, err := s.db.Deliveries(ctx, rule.ID, deliveriesShown)
		if err != nil {
			s.internalError(w, r, err)
			return
		}
		for _, dl := range ds {
			as, err := s.db.Attempts(ctx, dl.ID)
			if err != nil {
				s.internalError(w, r, err)
				return
			}
			row.Deliveries = append(row.Deliveries, deliveryRow{D: dl, Attempts: as})
		}
		d.Rules = append(d.Rules, row)
	}
	s.render(w, r, status, "alerts.html", "Alerts", d)
}

// addAlertRule stores a rule from the form; problems are shown above the
// form, which keeps what was typed (but not the secret).
func (s *Server) addAlertRule(w http.ResponseWriter, r *http.Request) {
	vals := map[string]string{}
	for _, k := range []string{"process", "target", "webhook", "email", "unexplained_after", "digest_at"} {
		vals[k] = strings.TrimSpace(r.PostFormValue(k))
	}
	on := map[string]bool{}
	var list []string
	for _, t := range r.PostForm["on"] {
		on[t] = true
		list = append(list, t)
	}
	if r.PostFormValue("each_lot") != "" {
		vals["each_lot"] = "1"
	}
	var problems []string
	rule := store.AlertRule{Secret: r.PostFormValue("secret"), EachLot: vals["each_lot"] != "", Digest: vals["digest_at"]}
	pid, err := strconv.ParseInt(vals["process"], 10, 64)
	if err != nil {
		problems = append(problems, fmt.Sprintf("process %q: choose a process", vals["process"]))
	}
	rule.ProcessID = pid
	switch vals["target"] {
	case "email":
		rule.Email = vals["email"]
		rule.Secret = ""
	default:
		rule.Webhook = vals["webhook"]
	}
	if len(list) == 0 {
		problems = append(problems, "on: tick at least one trigger")
	}
	for _, t := range list {
		if _, ps := store.CheckTriggers(t); len(ps) > 0 {
			problems = append(problems, ps[0].String())
		}
	}
	rule.On = list
	if a := vals["unexplained_after"]; a != "" && on[store.TriggerUnexplained] {
		d, err := time.ParseDuration(a)
		if err != nil {
			problems = append(problems, fmt.Sprintf("unexplained after %q: not a duration (e.g. 4h, 90m)", a))
		}
		rule.UnexplainedAfter = d
	}
	if len(problems) == 0 {
		_, err := s.db.AddAlertRule(r.Context(), who(r).user.Name, rule)
		var ve *store.ValidationError
		switch {
		case errors.As(err, &ve):
			for _, p := range ve.Problems {
				problems = append(problems, p.String())
			}
		case errors.Is(err, store.ErrNotFound) || errors.Is(err, store.ErrInvalid):
			problems = append(problems, err.Error())
		case err != nil:
			s.internalError(w, r, err)
			return
		default:
			http.Redirect(w, r, "/alerts?done=added", http.StatusSeeOther)
			return
		}
	}
	s.showAlerts(w, r, statusOf(errFormRefused), vals, on, problems)
}

// pathAlertRule reads the rule of the path; false when answered.
func (s *Server) pathAlertRule(w http.ResponseWriter, r *http.Request) (store.AlertRule, bool) {
	id, err := strconv.ParseInt(chi.URLParam(r, "rule"), 10, 64)
	if err != nil {
		s.fail(w, r, refuse(store.ErrNotFound, "no such alert rule", "There is no such alert rule."))
		return store.AlertRule{}, false
	}
	rule, err := s.db.AlertRule(r.Context(), id)
	if errors.Is(err, store.ErrNotFound) || (err == nil && !rule.Active) {
		s.fail(w, r, refuse(store.ErrNotFound, "no such alert rule", "There is no such alert rule (it may have been removed)."))
		return store.AlertRule{}, false
	}
	if err != nil {
		s.internalError(w, r, err)
		return store.AlertRule{}, false
	}
	return rule, true
}

func (s *Server) removeAlertRule(w http.ResponseWriter, r *http.Request) {
	rule, ok := s.pathAlertRule(w, r)
	if !ok {
		return
	}
	if err := s.db.RemoveAlertRule(r.Context(), who(r).user.Name, rule.ID); err != nil {
		s.internalError(w, r, err)
		return
	}
	http.Redirect(w, r, "/alerts?done=removed", http.StatusSeeOther)
}

// testAlertRule puts a test message for the rule in the outbox; it is
// sent and logged like any alert.
func (s *Server) testAlertRule(w http.ResponseWriter, r *http.Request) {
	rule, ok := s.pathAlertRule(w, r)
	if !ok {
		return
	}
	if err := s.alerts.Test(r.Context(), rule, s.now()); err != nil {
		s.internalError(w, r, err)
		return
	}
	http.Redirect(w, r, "/alerts?done=test#rule-"+formatID(rule.ID), http.StatusSeeOther)
}

// failedAlerts counts the messages given up, for the board.
func (s *Server) failedAlerts(ctx context.Context) int {
	c, err := s.db.DeliveryCounts(ctx)
	if err != nil {
		s.log.Error("status board: alert deliveries", "err", err)
		return 0
	}
	return c[store.DeliveryFailed]
}
