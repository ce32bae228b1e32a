package web

import (
	"lotwatch/spc"
)

// ChartJSON is the analysis of one chart in the JSON shape shared by the
// API (GET /api/v1/processes/{id}/chart) and `lotwatch analyze --json`.
// "sigma" is the limit multiplier K. Fields after the shared ones are
// additions; the web package fills ID, Time, Limits and LimitSet.
type ChartJSON struct {
	Chart      string          `json:"chart"`
	Method     string          `json:"method"`
	Center     Num             `json:"center"`
	Sigma      Num             `json:"sigma"`
	Alpha      Num             `json:"alpha"`
	Rate       Num             `json:"rate"`
	SigmaZ     Num             `json:"sigma_z"`
	Lots       []LotJSON       `json:"lots"`
	Signals    []SignalJSON    `json:"signals"`
	Warnings   []string        `json:"warnings"`
	Dispersion *DispersionJSON `json:"dispersion"`

	// Filled by the API, whose chart comes in pages: the lots in the
	// window, and the cursor of the next page (absent on the last).
	Total int    `json:"total,omitempty"`
	Next  string `json:"next,omitempty"`
}

// LotJSON is one lot's point on the chart.
type LotJSON struct {
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

// SignalJSON is one signal: of a run rule, or of a shift monitor
// (CUSUM, EWMA). Kind is "limits", "run" or "shift" (spc.Rule.Kind).
type SignalJSON struct {
	Rule        string   `json:"rule"`
	Kind        string   `json:"kind"`
	Lots        []string `json:"lots"`
	Description string   `json:"description"`
	First       int      `json:"first"`
	Last        int      `json:"last"`
}

// DispersionJSON is the check of the lot-to-lot variation against the
// binomial or Poisson model.
type DispersionJSON struct {
	ChiSquare     Num    `json:"chi_square"`
	DF            int    `json:"df"`
	Ratio         Num    `json:"ratio"`
	PValue        Num    `json:"p_value"`
	SigmaZ        Num    `json:"sigma_z"`
	Overdispersed bool   `json:"overdispersed"`
	Advice        string `json:"advice,omitempty"`
}

// AnalysisJSON renders an analysis in the shared JSON shape. It never
// returns nil for a non-nil analysis; slices are empty, not null.
func AnalysisJSON(a *spc.Analysis) *ChartJSON {
	if a == nil {
		return nil
	}
	out := analysisHead(a)
	out.Lots = make([]LotJSON, len(a.Points))
	for i, p := range a.Points {
		out.Lots[i] = pointJSON(p)
	}
	for _, s := range a.Signals {
		out.Signals = append(out.Signals, toSignalJSON(s))
	}
	return out
}

// analysisHead is the chart's figures without its lots and signals.
func analysisHead(a *spc.Analysis) *ChartJSON {
	out := &ChartJSON{
		Chart:    string(a.Chart),
		Method:   string(a.Method),
		Center:   Num(a.Center),
		Sigma:    Num(a.K),
		Alpha:    Num(a.Alpha),
		Rate:     Num(a.Rate),
		SigmaZ:   Num(a.SigmaZ),
		Lots:     []LotJSON{},
		Signals:  make([]SignalJSON, 0, len(a.Signals)),
		Warnings: make([]string, 0, len(a.Warnings)),
	}
	for _, w := range a.Warnings {
		out.Warnings = append(out.Warnings, w.Message)
	}
	d := a.Dispersion
	out.Dispersion = &DispersionJSON{
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

// pointJSON is one lot's point in the shared shape.
func pointJSON(p spc.Point) LotJSON {
	return LotJSON{
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
		Signals:     ruleNames(p.Rules),
	}
}

// toSignalJSON is one signal in the shared shape.
func toSignalJSON(s spc.Signal) SignalJSON {
	lots := s.Lots
	if lots == nil {
		lots = []string{}
	}
	return SignalJSON{
		Rule:        ruleName(s.Rule),
		Kind:        s.Rule.Kind(),
		Lots:        lots,
		Description: s.Description,
		First:       s.First,
		Last:        s.Last,
	}
}

// ruleNames lists the short names of the rules in s ("we1", "nelson3"),
// never nil.
func ruleNames(s spc.RuleSet) []string {
	rs := s.Rules()
	out := make([]string, len(rs))
	for i, r := range rs {
		out[i] = r.String()
	}
	return out
}

func ruleName(r spc.Rule) string { return r.String() }
