package spc

import (
	"errors"
	"fmt"
	"sort"
)

// Phase is one run of lots judged against one limit set: the lots from
// Start up to the next phase's Start. Config.Standard normally holds the
// frozen limit set's centre (and σ_z for Laney); without it the centre is
// estimated from the phase's own lots.
type Phase struct {
	Start  int
	Config Config
}

// AnalyzePhases judges consecutive runs of lots, each against its own
// limits (phase II across changes of the limit set), and applies the run
// rules once over the whole sequence, so that a run that starts before a
// change of limits and goes on after it is found. Zones follow each
// phase's own K. Every phase must use the same chart and the same
// Standardized choice; the Rules of the phase configs are ignored.
//
// The summary fields of the result (Method, K, Alpha, Rate, Center,
// SigmaZ, Baseline, Dispersion) are those of the last phase, the limits
// in force; Phases describes each one. Warnings of a phase start with its
// number.
func AnalyzePhases(lots []Lot, phases []Phase, rules RuleSet) (*Analysis, error) {
	if len(phases) == 0 {
		return nil, errors.New("no phases given")
	}
	if len(lots) == 0 {
		return nil, errors.New("no lots to analyze")
	}
	if phases[0].Start != 0 {
		return nil, fmt.Errorf("phase 1 starts at lot %d; the first phase must start at the first lot (0)", phases[0].Start)
	}
	for j := 1; j < len(phases); j++ {
		switch {
		case phases[j].Start <= phases[j-1].Start:
			return nil, fmt.Errorf("phase %d starts at lot %d, not after phase %d (lot %d)", j+1, phases[j].Start, j, phases[j-1].Start)
		case phases[j].Start >= len(lots):
			return nil, fmt.Errorf("phase %d starts at lot %d, past the last of the %d lots", j+1, phases[j].Start, len(lots))
		case phases[j].Config.Chart != phases[0].Config.Chart:
			return nil, fmt.Errorf("phase %d uses the %s chart and phase 1 the %s chart; every phase must use the same chart", j+1, phases[j].Config.Chart, phases[0].Config.Chart)
		case phases[j].Config.Standardized != phases[0].Config.Standardized:
			return nil, fmt.Errorf("phase %d and phase 1 differ in plotting z; every phase must plot the same statistic", j+1)
		}
	}
	out := &Analysis{Points: make([]Point, 0, len(lots)), Phases: make([]PhaseResult, len(phases))}
	ks := make([]float64, len(phases))
	for j, ph := range phases {
		end := len(lots)
		if j+1 < len(phases) {
			end = phases[j+1].Start
		}
		cfg := ph.Config
		cfg.Rules = 0
		a, err := analyze(lots[ph.Start:end], cfg, ph.Start)
		if err != nil {
			return nil, fmt.Errorf("phase %d: %w", j+1, err)
		}
		out.Points = append(out.Points, a.Points...)
		for _, w := range a.Warnings {
			w.Message = fmt.Sprintf("Phase %d: %s", j+1, w.Message)
			out.Warnings = append(out.Warnings, w)
		}
		out.Phases[j] = PhaseResult{Start: ph.Start, End: end, Method: a.Method, K: a.K, Rate: a.Rate, Center: a.Center, SigmaZ: a.SigmaZ}
		ks[j] = a.K
		out.Chart, out.Method, out.K, out.Alpha = a.Chart, a.Method, a.K, a.Alpha
		out.Rate, out.Center, out.SigmaZ, out.Baseline, out.Dispersion = a.Rate, a.Center, a.SigmaZ, a.Baseline, a.Dispersion
	}
	phaseOf := func(i int) int {
		return sort.Search(len(phases), func(j int) bool { return phases[j].Start > i }) - 1
	}
	out.Signals = applyRules(out.Points, rules, func(i int) float64 { return ks[phaseOf(i)] })
	return out, nil
}
