// Package chartjson is the JSON shape of an analysis, shared by the API
// (GET /api/v1/processes/{id}/chart) and `lotwatch analyze --format
// json`: the chart's figures, one entry per lot, the signals, and the
// shift monitors. Like spc, it does no I/O; the web package fills the
// fields that come from the store (a lot's id, time and limit set).
package chartjson

import (
	"math"
	"strconv"

	"lotwatch/spc"
)

// Num is a float64 that encodes NaN and ±Inf (an undefined limit, say) as
// JSON null instead of failing; every other value is a JSON number.
type Num float64

// MarshalJSON implements json.Marshaler.
func (n Num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(make([]byte, 0, 24), f, 'g', -1, 64), nil
}

// Chart is the analysis of one chart. "sigma" is the limit multiplier K.
// Fields after the shared ones are additions.
type Chart struct {
	Chart      string      `json:"chart"`
	Method     string      `json:"method"`
	Center     Num         `json:"center"`
	Sigma      Num         `json:"sigma"`
	Alpha      Num         `json:"alpha"`
	Rate       Num         `json:"rate"`
	SigmaZ     Num         `json:"sigma_z"`
	Lots       []Lot       `json:"lots"`
	Signals    []Signal    `json:"signals"`
	Warnings   []string    `json:"warnings"`
	Dispersion *Dispersion `json:"dispersion"`

	// Filled by the API, whose chart comes in pages: the lots in the
	// window, and the cursor of the next page (absent on the last).
	Total int    `json:"total,omitempty"`
	Next  string `json:"next,omitempty"`
}

// Lot is one lot's point on the chart.
type Lot struct {
	Lot         string   `json:"lot"`
	Inspected   int64    `json:"inspected"`
	Count       int64    `json:"count"`
	Value       Num      `json:"value"`
	Center      Num      `json:"center"`
	UCL         Num      `json:"ucl"`
	LCL         Num      `json:"lcl"`
	Sigma       Num      `json:"sigma"`
	Z           Num      `json:"z"`
	TailP       Num      `json:"tail_p"`
	OutOfLimits bool     `json:"out_of_limits"`
	Above       bool     `json:"above"`
	Below       bool     `json:"below"`
	Excluded    bool     `json:"excluded,omitempty"`
	Signals     []string `json:"signals"`

	// Filled where the lot comes from the store.
	ID       int64  `json:"id,omitempty"`
	Time     string `json:"time,omitempty"`
	Limits   string `json:"limits,omitempty"`    // "trial" or "frozen"
	LimitSet int    `json:"limit_set,omitempty"` // the frozen set's number
}

// Signal is one signal: of a run rule, or of a shift monitor (CUSUM,
// EWMA). Kind is "limits", "run" or "shift" (spc.Rule.Kind).
type Signal struct {
	Rule        string   `json:"rule"`
	Kind        string   `json:"kind"`
	Lots        []string `json:"lots"`
	Description string   `json:"description"`
	First       int      `json:"first"`
	Last        int      `json:"last"`
}

// Dispersion is the check of the lot-to-lot variation against the
// binomial or Poisson model.
type Dispersion struct {
	ChiSquare     Num    `json:"chi_square"`
	DF            int    `json:"df"`
	Ratio         Num    `json:"ratio"`
	PValue        Num    `json:"p_value"`
	SigmaZ        Num    `json:"sigma_z"`
	Overdispersed bool   `json:"overdispersed"`
	Advice        string `json:"advice,omitempty"`
}

// Analysis renders an analysis, every lot and signal. It never returns
// nil for a non-nil analysis; slices are empty, not null.
func Analysis(a *spc.Analysis) *Chart {
	if a == nil {
		return nil
	}
	out := Head(a)
	out.Lots = make([]Lot, len(a.Points))
	for i, p := range a.Points {
		out.Lots[i] = PointOf(p)
	}
	for _, s := range a.Signals {
		out.Signals = append(out.Signals, SignalOf(s))
	}
	return out
}

// Head is the chart's figures without its lots and signals (empty
// slices), for a caller that renders a part of them.
func Head(a *spc.Analysis) *Chart {
	out := &Chart{
		Chart:    string(a.Chart),
		Method:   string(a.Method),
		Center:   Num(a.Center),
		Sigma:    Num(a.K),
		Alpha:    Num(a.Alpha),
		Rate:     Num(a.Rate),
		SigmaZ:   Num(a.SigmaZ),
		Lots:     []Lot{},
		Signals:  make([]Signal, 0, len(a.Signals)),
		Warnings: make([]string, 0, len(a.Warnings)),
	}
	for _, w := range a.Warnings {
		out.Warnings = append(out.Warnings, w.Message)
	}
	d := a.Dispersion
	out.Dispersion = &Dispersion{
		ChiSquare:     Num(d.ChiSquare),
		DF:            int(d.DF),
		Ratio:         Num(d.Ratio),
		PValue:        Num(d.PValue),
		SigmaZ:        Num(d.SigmaZ),
		Overdispersed: d.Overdispersed,
		Advice:        d.Advice,
	}
	return out
}

// PointOf is one lot's point.
func PointOf(p spc.Point) Lot {
	return Lot{
		Lot:         p.Lot.Code,
		Inspected:   p.Lot.Inspected,
		Count:       p.Lot.Count,
		Value:       Num(p.Value),
		Center:      Num(p.Center),
		UCL:         Num(p.UCL),
		LCL:         Num(p.LCL),
		Sigma:       Num(p.Sigma),
		Z:           Num(p.Z),
		TailP:       Num(p.TailP),
		OutOfLimits: p.Above || p.Below,
		Above:       p.Above,
		Below:       p.Below,
		Excluded:    p.Excluded,
		Signals:     RuleNames(p.Rules),
	}
}

// SignalOf is one signal.
func SignalOf(s spc.Signal) Signal {
	lots := s.Lots
	if lots == nil {
		lots = []string{}
	}
	return Signal{
		Rule:        s.Rule.String(),
		Kind:        s.Rule.Kind(),
		Lots:        lots,
		Description: s.Description,
		First:       s.First,
		Last:        s.Last,
	}
}

// RuleNames lists the short names of the rules in s ("we1", "nelson3"),
// never nil.
func RuleNames(s spc.RuleSet) []string {
	rs := s.Rules()
	out := make([]string, len(rs))
	for i, r := range rs {
		out[i] = r.String()
	}
	return out
}
