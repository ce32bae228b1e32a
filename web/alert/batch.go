package alert

import (
	"context"
	"fmt"
	"sort"
	"strings"
	"time"

	"lotwatch/store"
)

// batchesAtOnce is how many outbox batches one step judges; each is a
// whole chart's judging.
const batchesAtOnce = 8

// judgeBatches judges the pending batches (imported files, frozen limit
// sets): for each, one lots.signal message per rule of the process that
// hears of at least one of the batch's lots, naming them, instead of one
// message per lot. A batch whose judging fails stays claimed and is
// judged again when the claim runs out.
func (w *Worker) judgeBatches(ctx context.Context) error {
	db := w.cfg.DB
	if ok, err := db.HasPendingAlertBatches(ctx); err != nil || !ok {
		return err
	}
	bs, err := db.ClaimAlertBatches(ctx, w.cfg.Owner, w.lease(), batchesAtOnce)
	if err != nil || len(bs) == 0 {
		return err
	}
	rules, err := db.AlertRules(ctx)
	if err != nil {
		return err
	}
	for _, b := range bs {
		ds, err := w.judgeBatch(ctx, b, rules)
		if err != nil {
			w.cfg.Log.Error("alerts: judging a batch of lots", "process", b.ProcessID, "cause", b.Cause, "err", err)
			continue
		}
		if err := db.FinishAlertBatch(ctx, b.ID, ds); err != nil {
			return err
		}
		if len(ds) > 0 {
			w.Wake()
		}
	}
	return nil
}

// judgeBatch makes the messages of one batch.
func (w *Worker) judgeBatch(ctx context.Context, b store.AlertBatch, rules []store.AlertRule) ([]store.NewDelivery, error) {
	var mine []store.AlertRule
	for _, r := range rules {
		if r.ProcessID == b.ProcessID {
			mine = append(mine, r)
		}
	}
	if len(mine) == 0 {
		return nil, nil
	}
	p, err := w.cfg.DB.Process(ctx, b.ProcessID)
	if err != nil {
		return nil, err
	}
	ids, err := w.batchLots(ctx, b)
	if err != nil || len(ids) == 0 {
		return nil, err
	}
	vs, err := w.cfg.Judge(ctx, p, ids)
	if err != nil {
		return nil, err
	}
	judged := make([]Verdict, 0, len(vs))
	for _, v := range vs {
		judged = append(judged, v)
	}
	sort.Slice(judged, func(i, j int) bool {
		a, c := judged[i].Lot, judged[j].Lot
		return a.Time.Before(c.Time) || (a.Time.Equal(c.Time) && a.ID < c.ID)
	})
	var ds []store.NewDelivery
	for _, r := range mine {
		m, ok := batchMessage(p, b, r, judged, w.cfg.PublicURL)
		if !ok {
			continue
		}
		body, err := encode(m)
		if err != nil {
			return nil, err
		}
		ds = append(ds, store.NewDelivery{MsgID: BatchMsgID(b.ID, r.ID), RuleID: r.ID, Type: TypeBatch, Payload: body, NotBefore: w.digestTime(r, p)})
	}
	return ds, nil
}

// batchLots lists the ids of the lots a batch judges: those an import
// added, or those from the time a limit set is in force.
func (w *Worker) batchLots(ctx context.Context, b store.AlertBatch) ([]int64, error) {
	if b.Kind == store.BatchImport {
		ids := make([]int64, 0, b.Last-b.First+1)
		for id := b.First; id <= b.Last; id++ {
			ids = append(ids, id)
		}
		return ids, nil
	}
	lots, err := w.cfg.DB.Lots(ctx, b.ProcessID, b.From, time.Time{})
	if err != nil {
		return nil, err
	}
	ids := make([]int64, len(lots))
	for i, l := range lots {
		ids[i] = l.ID
	}
	return ids, nil
}

// batchMessage is the lots.signal message of batch b for rule r, over the
// judged lots in chart order; false when r hears of none of them.
func batchMessage(p store.Process, b store.AlertBatch, r store.AlertRule, judged []Verdict, publicURL string) (BatchMessage, bool) {
	d := BatchData{ProcessID: p.ID, Process: p.Name, Change: b.Kind, Cause: b.Cause, Judged: len(judged),
		Counts: map[string]int{}, Kinds: []string{}, Rules: []string{}, Lots: []LotData{},
		URL: strings.TrimRight(publicURL, "/") + fmt.Sprintf("/processes/%d", p.ID)}
	for _, v := range judged {
		kinds := matches(r, v)
		if len(kinds) == 0 {
			continue
		}
		d.Signalling++
		h := heard(r, v)
		for _, k := range kinds {
			d.Counts[k]++
		}
		for _, k := range h.Kinds {
			if !contains(d.Kinds, k) {
				d.Kinds = append(d.Kinds, k)
			}
		}
		for _, rule := range h.Rules {
			if !contains(d.Rules, rule) {
				d.Rules = append(d.Rules, rule)
			}
		}
		if len(d.Lots) < BatchListed {
			d.Lots = append(d.Lots, lotMessage(TypeSignal, p, h, b.Created, publicURL, "").Data)
		} else {
			d.More++
		}
	}
	if d.Signalling == 0 {
		return BatchMessage{}, false
	}
	d.Verdict = batchWords(d)
	return BatchMessage{Type: TypeBatch, Timestamp: b.Created.UTC().Format(time.RFC3339), Data: d}, true
}

// batchWords says in plain words how many of a batch's lots signal, and
// how: "3 of the 10000 lots judged signal: 2 out of limits, 1 run rule".
func batchWords(d BatchData) string {
	var parts []string
	for _, k := range store.Triggers {
		if n := d.Counts[k]; n > 0 {
			parts = append(parts, fmt.Sprintf("%d %s", n, strings.ReplaceAll(k, "_", " ")))
		}
	}
	lots := "lots"
	if d.Judged == 1 {
		lots = "lot"
	}
	verb := "signal"
	if d.Signalling == 1 {
		verb = "signals"
	}
	return fmt.Sprintf("%d of the %d %s judged %s: %s", d.Signalling, d.Judged, lots, verb, strings.Join(parts, ", "))
}
