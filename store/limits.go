package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"lotwatch/spc"
)

// LimitSet is a frozen set of control limits of a process: computed (by
// spc) from a baseline of lots with some excluded for stated reasons, and
// in force from EffectiveFrom until the next set's EffectiveFrom.
type LimitSet struct {
	ID, ProcessID int64
	Number        int // 1, 2, … within the process
	Method        spc.Method
	K             float64
	Center        float64 // the per-unit rate spc.Analysis.Rate: p̄ (p and np), ū (u) or c̄ (c)
	SigmaZ        float64 // Laney σ_z (1 for the other methods)
	// Monitors are the CUSUM (with its decision interval CUSUMH) and EWMA
	// frozen with the centre; zero when the process watched none.
	Monitors spc.Monitors

	BaselineFrom, BaselineTo time.Time
	BaselineLots             int
	Excluded                 map[string]string // lot code → reason

	EffectiveFrom time.Time
	FrozenBy      string
	FrozenAt      time.Time
	Reason        string
}

// LimitSetAt returns the set in force at t among sets (oldest first): the
// last whose EffectiveFrom is not after t; ok is false before the first.
func LimitSetAt(sets []LimitSet, t time.Time) (ls LimitSet, ok bool) {
	for _, s := range sets {
		if s.EffectiveFrom.After(t) {
			break
		}
		ls, ok = s, true
	}
	return ls, ok
}

// FreezeLimitSet stores a new limit set of ls.ProcessID and numbers it
// after the last one. A revision is a new set; the earlier ones stay.
// EffectiveFrom (zero → now) must be later than the last set's. Reason is
// required, and so is a reason for each excluded lot.
func (db *DB) FreezeLimitSet(ctx context.Context, actor string, ls LimitSet) (LimitSet, error) {
	var ps []Problem
	if _, err := spc.ParseMethod(string(ls.Method)); err != nil {
		ps = append(ps, Problem{Field: "method", Value: string(ls.Method), Reason: "is not sigma, exact or laney"})
	}
	if !(ls.K > 0 && ls.K <= 10) {
		ps = append(ps, Problem{Field: "k", Value: fmt.Sprint(ls.K), Reason: "must be greater than 0 and at most 10"})
	}
	if math.IsNaN(ls.Center) || math.IsInf(ls.Center, 0) || ls.Center < 0 {
		ps = append(ps, Problem{Field: "center", Value: fmt.Sprint(ls.Center), Reason: "must be a finite number not below 0"})
	}
	if ls.SigmaZ == 0 {
		ls.SigmaZ = 1
	}
	if math.IsNaN(ls.SigmaZ) || math.IsInf(ls.SigmaZ, 0) || ls.SigmaZ < 0 {
		ps = append(ps, Problem{Field: "sigma_z", Value: fmt.Sprint(ls.SigmaZ), Reason: "must be a finite number above 0"})
	}
	if !ls.BaselineFrom.IsZero() && !ls.BaselineTo.IsZero() && ls.BaselineTo.Before(ls.BaselineFrom) {
		ps = append(ps, Problem{Field: "baseline_to", Value: ls.BaselineTo.Format(time.RFC3339), Reason: "is before the start of the baseline"})
	}
	if ls.BaselineLots < 0 {
		ps = append(ps, Problem{Field: "baseline_lots", Value: fmt.Sprint(ls.BaselineLots), Reason: "must not be negative"})
	}
	codes := make([]string, 0, len(ls.Excluded))
	for code := range ls.Excluded {
		codes = append(codes, code)
	}
	sort.Strings(codes) // problems in a stable order
	for _, code := range codes {
		why := ls.Excluded[code]
		if strings.TrimSpace(why) == "" {
			ps = append(ps, Problem{Field: "excluded", Value: code, Reason: "has no reason for leaving the lot out of the baseline"})
		} else if p := checkText("excluded", why, 4000, false); len(p) > 0 {
			ps = append(ps, Problem{Field: "excluded", Value: code, Reason: "has a reason that " + p[0].Reason})
		}
	}
	ps = append(ps, checkReason(ls.Reason, "say why the limits are frozen")...)
	if m := ls.Monitors; m.CUSUMShift != 0 && !(m.CUSUMH > 0 && m.CUSUMH < 1e6) {
		ps = append(ps, Problem{Field: "cusum_h", Value: fmt.Sprint(m.CUSUMH), Reason: "must be a decision interval above 0 when a CUSUM is frozen"})
	}
	if len(ps) > 0 {
		return LimitSet{}, invalid(ps...)
	}
	if ls.Excluded == nil {
		ls.Excluded = map[string]string{}
	}
	err := db.write(ctx, func(w *wtx) error {
		p, err := processByID(w.Tx, ls.ProcessID)
		if err != nil {
			return err
		}
		if ls.EffectiveFrom.IsZero() {
			ls.EffectiveFrom = w.now
		}
		var last int
		var lastFrom int64
		err = w.QueryRow("SELECT number, effective_from FROM limit_sets WHERE process_id = ? ORDER BY number DESC LIMIT 1", p.ID).Scan(&last, &lastFrom)
		if err != nil && !errors.Is(err, sql.ErrNoRows) {
			return err
		}
		if last > 0 && ls.EffectiveFrom.UnixNano() <= lastFrom {
			return invalid(Problem{Field: "effective_from", Value: ls.EffectiveFrom.Format(time.RFC3339),
				Reason: fmt.Sprintf("is not after limit set %d, in force from %s", last, fromNanos(lastFrom, p.Location()).Format(time.RFC3339))})
		}
		ls.Number = last + 1
		ls.FrozenBy, ls.FrozenAt = actor, w.now.UTC()
		if ps := checkMonitors(p.Chart, &spc.Monitors{CUSUMShift: ls.Monitors.CUSUMShift, CUSUMARL0: ls.Monitors.CUSUMARL0, EWMALambda: ls.Monitors.EWMALambda, EWMAWidth: ls.Monitors.EWMAWidth, EWMAARL0: ls.Monitors.EWMAARL0}); len(ps) > 0 {
			return invalid(ps...)
		}
		excl, _ := json.Marshal(ls.Excluded)
		m := ls.Monitors
		err = w.QueryRow(`INSERT INTO limit_sets (process_id, number, method, k, center, sigma_z, baseline_from, baseline_to, baseline_lots, excluded, effective_from, frozen_by, frozen_at, reason,
			cusum_shift, cusum_arl0, cusum_h, ewma_lambda, ewma_width, ewma_arl0)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) RETURNING id`, p.ID, ls.Number, ls.Method, ls.K, ls.Center, ls.SigmaZ,
			nanos(ls.BaselineFrom), nanos(ls.BaselineTo), ls.BaselineLots, string(excl), ls.EffectiveFrom.UnixNano(), actor, w.now.UnixNano(), ls.Reason,
			m.CUSUMShift, m.CUSUMARL0, m.CUSUMH, m.EWMALambda, m.EWMAWidth, m.EWMAARL0).Scan(&ls.ID)
		if err != nil {
			return err
		}
		if err := w.bumpVersion(p.ID, true); err != nil {
			return err
		}
		ls.ProcessID = p.ID
		if err := w.audit(actor, "freeze", "limitset", ls.ID, ls.ID, nil, limitSetRecord(ls), ls.Reason); err != nil {
			return err
		}
		return w.queueAlertBatch(AlertBatch{ProcessID: p.ID, Kind: BatchLimits, From: ls.EffectiveFrom,
			Cause: fmt.Sprintf("limit set %d frozen by %s: %s", ls.Number, actor, ls.Reason)})
	})
	if err != nil {
		return LimitSet{}, err
	}
	return ls, nil
}

// LimitSets returns the limit sets of a process, oldest first.
func (db *DB) LimitSets(ctx context.Context, processID int64) ([]LimitSet, error) {
	p, err := db.Process(ctx, processID)
	if err != nil {
		return nil, err
	}
	loc := p.Location()
	rows, err := db.r.QueryContext(ctx, `SELECT id, process_id, number, method, k, center, sigma_z, baseline_from, baseline_to, baseline_lots, excluded, effective_from, frozen_by, frozen_at, reason,
		cusum_shift, cusum_arl0, cusum_h, ewma_lambda, ewma_width, ewma_arl0
		FROM limit_sets WHERE process_id = ? ORDER BY number`, processID)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []LimitSet
	for rows.Next() {
		var ls LimitSet
		var bf, bt, ef, fa int64
		var excl string
		if err := rows.Scan(&ls.ID, &ls.ProcessID, &ls.Number, &ls.Method, &ls.K, &ls.Center, &ls.SigmaZ, &bf, &bt, &ls.BaselineLots, &excl, &ef, &ls.FrozenBy, &fa, &ls.Reason,
			&ls.Monitors.CUSUMShift, &ls.Monitors.CUSUMARL0, &ls.Monitors.CUSUMH, &ls.Monitors.EWMALambda, &ls.Monitors.EWMAWidth, &ls.Monitors.EWMAARL0); err != nil {
			return nil, err
		}
		if err := json.Unmarshal([]byte(excl), &ls.Excluded); err != nil {
			return nil, fmt.Errorf("store: limit set %d: excluded: %w", ls.ID, err)
		}
		ls.BaselineFrom, ls.BaselineTo = fromNanos(bf, loc), fromNanos(bt, loc)
		ls.EffectiveFrom, ls.FrozenAt = fromNanos(ef, loc), fromNanos(fa, loc)
		out = append(out, ls)
	}
	return out, rows.Err()
}

// Annotation records an assignable cause and the corrective action, on a
// lot or on a signal (Rule) of the chart; open until closed. With
// NoCauseFound it records instead that the lot or signal was investigated
// and no assignable cause was found, Reason saying why (common-cause
// noise is a finding too); such an annotation is closed when recorded and
// has no Cause.
type Annotation struct {
	ID, ProcessID int64
	LotID         int64  // 0 if on a signal only
	Rule          string // signal rule or ""
	Cause, Action string
	NoCauseFound  bool
	Reason        string // why no cause was found; "" for a cause
	Closed        bool
	By            string
	At            time.Time
	ClosedBy      string
	ClosedAt      time.Time
}

type annotationAudit struct {
	ProcessID int64  `json:"process_id"`
	LotID     int64  `json:"lot_id,omitempty"`
	Rule      string `json:"rule,omitempty"`
	Cause     string `json:"cause"`
	Action    string `json:"action"`
	Closed    bool   `json:"closed"`
	NoCause   bool   `json:"no_cause_found,omitempty"`
	Reason    string `json:"reason,omitempty"`
}

// checkRule checks the rule an annotation is on: empty (on a lot only) or
// the name of one run rule, as the chart names its signals (we1 … we4,
// nelson1 … nelson8).
func checkRule(rule string) []Problem {
	if rule == "" {
		return nil
	}
	if _, err := spc.ParseRule(rule); err != nil {
		return []Problem{{Field: "rule", Value: rule, Reason: "is not the name of one run rule (we1 … we4, nelson1 … nelson8) or shift monitor (cusum, ewma)"}}
	}
	return nil
}

// AddAnnotation stores an annotation; Cause is required, LotID (if set)
// must be a lot of the process. An annotation added with Closed set is
// closed by the actor at once. With NoCauseFound, Reason is required
// instead of Cause (which must then be empty) and the annotation is
// closed at once.
func (db *DB) AddAnnotation(ctx context.Context, actor string, a Annotation) (Annotation, error) {
	ps := checkAnnotationText(a)
	if a.NoCauseFound {
		a.Closed = true
	}
	ps = append(ps, checkRule(a.Rule)...)
	if a.LotID == 0 && a.Rule == "" {
		ps = append(ps, Problem{Field: "lot", Reason: "is not given: an annotation is on a lot or on a signal"})
	}
	if len(ps) > 0 {
		return Annotation{}, invalid(ps...)
	}
	err := db.write(ctx, func(w *wtx) error {
		if _, err := processByID(w.Tx, a.ProcessID); err != nil {
			return err
		}
		var lotID any
		if a.LotID != 0 {
			var pid int64
			if err := w.QueryRow("SELECT process_id FROM lots WHERE id = ?", a.LotID).Scan(&pid); errors.Is(err, sql.ErrNoRows) || (err == nil && pid != a.ProcessID) {
				return fmt.Errorf("lot %d of process %d: %w", a.LotID, a.ProcessID, ErrNotFound)
			} else if err != nil {
				return err
			}
			lotID = a.LotID
		}
		a.By, a.At = actor, w.now.UTC()
		var closedAt int64
		a.ClosedBy, a.ClosedAt = "", time.Time{}
		if a.Closed {
			a.ClosedBy, a.ClosedAt, closedAt = actor, a.At, w.now.UnixNano()
		}
		err := w.QueryRow(`INSERT INTO annotations (process_id, lot_id, rule, cause, action, closed, by, at, closed_by, closed_at, no_cause, reason) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) RETURNING id`,
			a.ProcessID, lotID, a.Rule, a.Cause, a.Action, a.Closed, actor, w.now.UnixNano(), a.ClosedBy, closedAt, a.NoCauseFound, a.Reason).Scan(&a.ID)
		if err != nil {
			return err
		}
		return w.audit(actor, "add", "annotation", a.ID, a.ID, nil, annotationAudit{a.ProcessID, a.LotID, a.Rule, a.Cause, a.Action, a.Closed, a.NoCauseFound, a.Reason}, "")
	})
	if err != nil {
		return Annotation{}, err
	}
	return a, nil
}

// checkAnnotationText checks the text fields of an annotation: a cause,
// or with NoCauseFound a reason and no cause.
func checkAnnotationText(a Annotation) []Problem {
	var ps []Problem
	switch {
	case a.NoCauseFound && strings.TrimSpace(a.Reason) == "":
		ps = append(ps, Problem{Field: "reason", Reason: "is empty: say why no assignable cause was found (what was checked)"})
	case a.NoCauseFound && a.Cause != "":
		ps = append(ps, Problem{Field: "cause", Value: a.Cause, Reason: "is given although no assignable cause was found: record one or the other"})
	case !a.NoCauseFound && strings.TrimSpace(a.Cause) == "":
		ps = append(ps, Problem{Field: "cause", Reason: "is empty"})
	case !a.NoCauseFound && a.Reason != "":
		ps = append(ps, Problem{Field: "reason", Value: a.Reason, Reason: "is only for \"no assignable cause found\""})
	}
	ps = append(ps, checkText("cause", a.Cause, 4000, false)...)
	ps = append(ps, checkText("reason", a.Reason, 4000, false)...)
	return append(ps, checkText("action", a.Action, 4000, false)...)
}

// CloseAnnotation closes an open annotation; a non-empty action replaces
// the recorded corrective action (the audit trail keeps the old one).
func (db *DB) CloseAnnotation(ctx context.Context, actor string, id int64, action string) error {
	if ps := checkText("action", action, 4000, false); len(ps) > 0 {
		return invalid(ps...)
	}
	return db.write(ctx, func(w *wtx) error {
		var old annotationAudit
		var lotID sql.NullInt64
		err := w.QueryRow("SELECT process_id, lot_id, rule, cause, action, closed, no_cause, reason FROM annotations WHERE id = ?", id).
			Scan(&old.ProcessID, &lotID, &old.Rule, &old.Cause, &old.Action, &old.Closed, &old.NoCause, &old.Reason)
		if errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("annotation %d: %w", id, ErrNotFound)
		}
		if err != nil {
			return err
		}
		old.LotID = lotID.Int64
		if old.Closed {
			return invalid(Problem{Field: "annotation", Value: fmt.Sprint(id), Reason: "is already closed"})
		}
		nw := old
		nw.Closed = true
		if action != "" {
			nw.Action = action
		}
		if _, err := w.Exec("UPDATE annotations SET action = ?, closed = 1, closed_by = ?, closed_at = ? WHERE id = ?", nw.Action, actor, w.now.UnixNano(), id); err != nil {
			return err
		}
		return w.audit(actor, "close", "annotation", id, id, old, nw, "")
	})
}

// Annotations lists the annotations of a process, oldest first.
func (db *DB) Annotations(ctx context.Context, processID int64) ([]Annotation, error) {
	return db.annotations(ctx, "WHERE process_id = ?", processID)
}

// AllAnnotations lists the annotations of every process, oldest first:
// one read for a view across the plant.
func (db *DB) AllAnnotations(ctx context.Context) ([]Annotation, error) {
	return db.annotations(ctx, "")
}

func (db *DB) annotations(ctx context.Context, where string, args ...any) ([]Annotation, error) {
	rows, err := db.r.QueryContext(ctx, `SELECT id, process_id, lot_id, rule, cause, action, closed, by, at, closed_by, closed_at, no_cause, reason
		FROM annotations `+where+` ORDER BY at, id`, args...)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Annotation
	for rows.Next() {
		var a Annotation
		var lotID sql.NullInt64
		var at, closedAt int64
		if err := rows.Scan(&a.ID, &a.ProcessID, &lotID, &a.Rule, &a.Cause, &a.Action, &a.Closed, &a.By, &at, &a.ClosedBy, &closedAt, &a.NoCauseFound, &a.Reason); err != nil {
			return nil, err
		}
		a.LotID = lotID.Int64
		a.At, a.ClosedAt = fromNanos(at, time.UTC), fromNanos(closedAt, time.UTC)
		out = append(out, a)
	}
	return out, rows.Err()
}
