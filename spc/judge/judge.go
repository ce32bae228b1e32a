// Package judge judges a process's record against its frozen limit sets:
// the lots before the first set against trial limits estimated from
// themselves, the lots from each set's start on against that set, with
// the run rules running across the joins. It is the one place where a
// lot is judged; the web pages, the API and the weekly review use it.
// Like spc, it does no I/O.
package judge

import (
	"errors"
	"sort"
	"time"

	"lotwatch/spc"
)

// Set is a frozen limit set as judging needs it: from EffectiveFrom on,
// lots are judged with the limits of Method and K around the standard
// Center and SigmaZ.
type Set struct {
	Number        int
	EffectiveFrom time.Time
	Method        spc.Method
	K             float64
	Center        float64
	SigmaZ        float64
}

// Judge judges lots (in time order; times[i] is when lots[i] was
// inspected) against sets, which must be in the order they come into
// force (EffectiveFrom, then Number). Lots before the first set are
// judged against trial limits of trial (its Rules are ignored; rules
// applies throughout), the lots from each set's EffectiveFrom on against
// that set (spc.AnalyzePhases). A later set starting at the same lot
// replaces the earlier; a set in force only after the last lot judges
// nothing. setOf gives for each lot the Number of the set judging it, 0
// for trial limits.
func Judge(lots []spc.Lot, times []time.Time, trial spc.Config, sets []Set, rules spc.RuleSet) (a *spc.Analysis, setOf []int, err error) {
	if len(lots) == 0 {
		return nil, nil, errors.New("no lots")
	}
	if len(times) != len(lots) {
		return nil, nil, errors.New("judge: one time per lot is needed")
	}
	setOf = make([]int, len(lots))
	trial.Rules = 0
	var phases []spc.Phase
	for _, ls := range sets {
		i := sort.Search(len(times), func(i int) bool { return !times[i].Before(ls.EffectiveFrom) })
		if i >= len(lots) {
			break // in force only after the last lot
		}
		if len(phases) == 0 && i > 0 {
			phases = append(phases, spc.Phase{Start: 0, Config: trial})
		}
		cfg := spc.Config{Chart: trial.Chart, Method: ls.Method, K: ls.K,
			Standard: &spc.Standard{Center: ls.Center, SigmaZ: ls.SigmaZ}}
		if n := len(phases); n > 0 && phases[n-1].Start == i {
			phases[n-1].Config = cfg
		} else {
			phases = append(phases, spc.Phase{Start: i, Config: cfg})
		}
		for j := i; j < len(lots); j++ {
			setOf[j] = ls.Number
		}
	}
	if len(phases) == 0 {
		trial.Rules = rules
		a, err = spc.Analyze(lots, trial)
	} else {
		a, err = spc.AnalyzePhases(lots, phases, rules)
	}
	return a, setOf, err
}
