package alert

import (
	"context"
	"time"

	"lotwatch/store"
)

// escalate makes the messages of the unexplained rules, every
// EscalateEvery: for each lot of the rule's process that still needs
// attention (Config.Attention) and was put in the outbox at least the
// rule's delay ago, one lot.unexplained message. Its id is one per lot and
// rule, so a lot is escalated once, by whichever server looks first; a
// lot whose cause was recorded before the delay ran out no longer needs
// attention and is not escalated. Only lots stored while the process had
// alert rules are escalated (the outbox holds no others), so adding a rule
// does not flood the receiver with the record's history.
func (w *Worker) escalate(ctx context.Context) error {
	now := w.cfg.Now()
	if w.cfg.Attention == nil || now.Sub(w.escalated) < w.cfg.EscalateEvery {
		return nil
	}
	w.escalated = now
	rules, err := w.cfg.DB.AlertRules(ctx)
	if err != nil {
		return err
	}
	byProc := map[int64][]store.AlertRule{}
	var order []int64
	for _, r := range rules {
		if !r.Has(store.TriggerUnexplained) {
			continue
		}
		if byProc[r.ProcessID] == nil {
			order = append(order, r.ProcessID)
		}
		byProc[r.ProcessID] = append(byProc[r.ProcessID], r)
	}
	var ds []store.NewDelivery
	for _, pid := range order {
		made, err := w.escalateProcess(ctx, pid, byProc[pid], now)
		if err != nil {
			w.cfg.Log.Error("alerts: unexplained lots", "process", pid, "err", err)
			continue
		}
		ds = append(ds, made...)
	}
	ids := make([]string, len(ds))
	for i, d := range ds {
		ids[i] = d.MsgID
	}
	made, err := w.cfg.DB.DeliveriesMade(ctx, ids)
	if err != nil {
		return err
	}
	fresh := ds[:0]
	for _, d := range ds {
		if !made[d.MsgID] {
			fresh = append(fresh, d)
		}
	}
	if ds = fresh; len(ds) == 0 {
		return nil
	}
	if err := w.cfg.DB.AddDeliveries(ctx, ds); err != nil {
		return err
	}
	w.Wake()
	return nil
}

func (w *Worker) escalateProcess(ctx context.Context, pid int64, rules []store.AlertRule, now time.Time) ([]store.NewDelivery, error) {
	p, err := w.cfg.DB.Process(ctx, pid)
	if err != nil {
		return nil, err
	}
	need, err := w.cfg.Attention(ctx, p)
	if err != nil || len(need) == 0 {
		return nil, err
	}
	queued, err := w.cfg.DB.AlertEventTimes(ctx, need)
	if err != nil {
		return nil, err
	}
	type due struct {
		lot  int64
		rule store.AlertRule
	}
	var dues []due
	var ids []int64
	for _, lot := range need {
		at, ok := queued[lot]
		if !ok {
			continue
		}
		for _, r := range rules {
			if !at.Before(r.Created) && now.Sub(at) >= r.UnexplainedAfter {
				dues = append(dues, due{lot, r})
				if len(ids) == 0 || ids[len(ids)-1] != lot {
					ids = append(ids, lot)
				}
			}
		}
	}
	if len(dues) == 0 {
		return nil, nil
	}
	vs, err := w.cfg.Judge(ctx, p, ids)
	if err != nil {
		return nil, err
	}
	var ds []store.NewDelivery
	for _, d := range dues {
		v, ok := vs[d.lot]
		if !ok {
			continue
		}
		body, err := encode(lotMessage(TypeUnexplained, p, v, now, w.cfg.PublicURL, ""))
		if err != nil {
			return nil, err
		}
		ds = append(ds, store.NewDelivery{MsgID: MsgID(TypeUnexplained, d.lot, d.rule.ID), RuleID: d.rule.ID, LotID: d.lot, Type: TypeUnexplained, Payload: body,
			NotBefore: w.digestTime(d.rule, p)})
	}
	return ds, nil
}
