// Package attention decides which lots still need someone to explain
// them: the lots a control chart flags — out of limits, or part of a
// run-rule or small-shift signal — for which nobody has yet recorded an
// assignable cause or the finding that no assignable cause was found.
//
// A flagged lot stays in need of attention whatever its age: a signal
// from last night's shift is not forgotten at midnight. A cause still
// being worked (open) and a closed one both explain the lot; so does "no
// assignable cause found", recorded with its reason, because common-cause
// noise is a legitimate finding.
//
// The functions here are pure: they read a judged chart and the
// process's annotations and do no I/O.
package attention

import (
	"slices"
	"strconv"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
)

// Kind is why a lot needs attention, in the words of the API.
type Kind string

// The kinds, from the most to the least pressing: a lot beyond a control
// limit; a lot in a run-rule signal (a pattern of lots within limits); a
// lot in a small-shift signal (CUSUM or EWMA: a sustained move of the
// rate too small for the limits to catch lot by lot).
const (
	OutOfLimits Kind = "out_of_limits"
	RunRule     Kind = "run_rule"
	Shift       Kind = "shift"
)

// SignalKind says what kind of evidence a signal is, read from its rule:
// a lot beyond a limit (Western Electric rule 1, Nelson test 1), a
// small-shift detector (CUSUM, EWMA: rules whose name starts so), or
// otherwise a run rule.
func SignalKind(r spc.Rule) Kind {
	switch name := r.String(); {
	case r == spc.RuleWE1 || r == spc.RuleNelson1:
		return OutOfLimits
	case strings.HasPrefix(name, "cusum") || strings.HasPrefix(name, "ewma"):
		return Shift
	default:
		return RunRule
	}
}

// Lot is one lot needing attention.
type Lot struct {
	ProcessID int64
	Process   string
	Area      string
	LotID     int64
	Lot       string
	Time      time.Time
	Shift     string
	// Kind is the most pressing unexplained reason: OutOfLimits before
	// Shift before RunRule.
	Kind Kind
	// Rules names the rules of the unexplained signals the lot is part of
	// ("we1", "nelson2", …), in the engine's order; empty for a lot out of
	// limits on a process that applies no run rule.
	Rules []string
	// Index is the lot's position on the chart.
	Index int
}

// Flagged is what one judged chart flags, before anyone explains it: the
// lots out of limits or in a signal, and the signals. It does not depend
// on the annotations, so it can be kept while they change, and it is
// small (a few lots in a hundred on a chart in control).
type Flagged struct {
	Lots    []FlaggedLot // in chart order
	Signals []FlaggedSignal
}

// FlaggedLot is one lot the chart flags, with its judged point: what a
// report of the lot's week shows of it without judging the record again.
type FlaggedLot struct {
	LotID   int64
	Lot     string
	Time    time.Time
	Shift   string
	Index   int   // position on the chart
	Out     bool  // beyond a control limit
	Signals []int // indices into Flagged.Signals of the signals it is part of
	// Value, UCL and LCL are the lot's plotted value and limits, Above
	// whether it lies beyond the upper limit; Set is the number of the
	// limit set judging it, 0 for trial limits.
	Value, UCL, LCL float64
	Above           bool
	Set             int
}

// FlaggedSignal is one signal of the chart, with the store ids of its
// lots.
type FlaggedSignal struct {
	Rule        spc.Rule
	Kind        Kind
	First, Last int // chart positions of its first and last lot
	LotIDs      []int64
	Description string
	Side        int8
}

// Flag collects what the chart flags. lots are the chart's lots in the
// order of a.Points; a is nil for a process without lots. setOf gives for
// each lot the number of the limit set judging it (nil: trial limits for
// all).
func Flag(lots []store.Lot, a *spc.Analysis, setOf []int) *Flagged {
	f := &Flagged{}
	if a == nil || len(a.Points) == 0 {
		return f
	}
	at := map[int]int{} // chart index → index into f.Lots
	flag := func(i int) *FlaggedLot {
		k, ok := at[i]
		if !ok {
			l := lots[i]
			k = len(f.Lots)
			at[i] = k
			pt := a.Points[i]
			fl := FlaggedLot{LotID: l.ID, Lot: l.Lot, Time: l.Time, Shift: l.Shift, Index: i,
				Value: pt.Value, UCL: pt.UCL, LCL: pt.LCL, Above: pt.Above}
			if i < len(setOf) {
				fl.Set = setOf[i]
			}
			f.Lots = append(f.Lots, fl)
		}
		return &f.Lots[k]
	}
	for i, pt := range a.Points {
		if pt.OutOfLimits() {
			flag(i).Out = true
		}
	}
	for _, sg := range a.Signals {
		fs := FlaggedSignal{Rule: sg.Rule, Kind: SignalKind(sg.Rule), First: sg.First, Last: sg.Last, Description: sg.Description, Side: sg.Side}
		for i := sg.First; i <= sg.Last && i < len(lots); i++ {
			fs.LotIDs = append(fs.LotIDs, lots[i].ID)
			fl := flag(i)
			fl.Signals = append(fl.Signals, len(f.Signals))
		}
		f.Signals = append(f.Signals, fs)
	}
	slices.SortFunc(f.Lots, func(a, b FlaggedLot) int { return a.Index - b.Index })
	return f
}

// At returns the flagged lot at chart position i, or nil when the chart
// does not flag it.
func (f *Flagged) At(i int) *FlaggedLot {
	k, ok := slices.BinarySearchFunc(f.Lots, i, func(fl FlaggedLot, i int) int { return fl.Index - i })
	if !ok {
		return nil
	}
	return &f.Lots[k]
}

// Size is the number of entries the flagged record holds (lots, and lots
// of signals), a measure of its memory for caches with a size limit.
func (f *Flagged) Size() int {
	n := len(f.Lots) + len(f.Signals)
	for _, sg := range f.Signals {
		n += len(sg.LotIDs)
	}
	for _, fl := range f.Lots {
		n += len(fl.Signals)
	}
	return n
}

// Find returns the lots of one judged chart that need attention, oldest
// first: Flag, then Unexplained.
func Find(p store.Process, lots []store.Lot, a *spc.Analysis, anns []store.Annotation) []Lot {
	return Flag(lots, a, nil).Unexplained(p, anns)
}

// Unexplained returns the flagged lots that need attention given the
// process's annotations, in chart order (oldest first).
//
// A reason for attention is explained thus:
//   - a lot out of limits, by an annotation on that lot;
//   - a signal, by an annotation on any of its lots that names the
//     signal's rule or no rule (a cause found for a run of lots explains
//     the run), or by an annotation on the lot itself.
//
// An annotation explains whether its cause is open or closed or no cause
// was found. A lot needs attention while any of its reasons is
// unexplained.
func (f *Flagged) Unexplained(p store.Process, anns []store.Annotation) []Lot {
	if f == nil || len(f.Lots) == 0 {
		return nil
	}
	onLot := byLot(anns)
	explained := make([]bool, len(f.Signals))
	for k, sg := range f.Signals {
		explained[k] = signalExplained(sg, onLot)
	}
	var out []Lot
	for _, fl := range f.Lots {
		if len(onLot[fl.LotID]) > 0 {
			continue
		}
		var rules spc.RuleSet
		shift, signal := false, false
		for _, k := range fl.Signals {
			if !explained[k] {
				rules |= f.Signals[k].Rule.Set()
				shift = shift || f.Signals[k].Kind == Shift
				signal = true
			}
		}
		if !fl.Out && !signal {
			continue
		}
		e := Lot{ProcessID: p.ID, Process: p.Name, Area: p.Area, LotID: fl.LotID, Lot: fl.Lot, Time: fl.Time, Shift: fl.Shift, Index: fl.Index, Rules: []string{}}
		for _, r := range rules.Rules() {
			e.Rules = append(e.Rules, r.String())
		}
		switch {
		case fl.Out:
			e.Kind = OutOfLimits
		case shift:
			e.Kind = Shift
		default:
			e.Kind = RunRule
		}
		out = append(out, e)
	}
	return out
}

// byLot groups the annotations on a lot by the lot's store id.
func byLot(anns []store.Annotation) map[int64][]store.Annotation {
	onLot := map[int64][]store.Annotation{}
	for _, an := range anns {
		if an.LotID != 0 {
			onLot[an.LotID] = append(onLot[an.LotID], an)
		}
	}
	return onLot
}

// Signal is a run-rule or small-shift signal nobody has explained yet,
// with those of its lots that still need attention: the lots one cause
// found for the signal explains together.
type Signal struct {
	FlaggedSignal
	Lots []Lot // in chart order
}

// Key names the signal in a worklist address: its rule and the store ids
// of its first and last lot.
func (sg Signal) Key() string {
	return sg.Rule.String() + "-" + strconv.FormatInt(sg.LotIDs[0], 10) + "-" + strconv.FormatInt(sg.LotIDs[len(sg.LotIDs)-1], 10)
}

// OpenSignals returns the run-rule and small-shift signals of the chart
// that nobody has explained and that still hold more than one lot needing
// attention, in chart order. A lot out of limits is its own signal and
// is explained on its own.
func (f *Flagged) OpenSignals(p store.Process, anns []store.Annotation) []Signal {
	if f == nil {
		return nil
	}
	need := map[int64]Lot{}
	for _, l := range f.Unexplained(p, anns) {
		need[l.LotID] = l
	}
	onLot := byLot(anns)
	var out []Signal
	for _, fs := range f.Signals {
		if fs.Kind == OutOfLimits || signalExplained(fs, onLot) {
			continue
		}
		sg := Signal{FlaggedSignal: fs}
		for _, id := range fs.LotIDs {
			if l, ok := need[id]; ok {
				sg.Lots = append(sg.Lots, l)
			}
		}
		if len(sg.Lots) > 1 {
			out = append(out, sg)
		}
	}
	return out
}

// signalExplained reports whether an annotation on one of the signal's
// lots names its rule or no rule.
func signalExplained(sg FlaggedSignal, onLot map[int64][]store.Annotation) bool {
	name := sg.Rule.String()
	for _, id := range sg.LotIDs {
		for _, an := range onLot[id] {
			if an.Rule == "" || an.Rule == name {
				return true
			}
		}
	}
	return false
}

// Causes counts a process's annotations as the status board shows them:
// causes still being worked (open) and explained findings (a closed cause,
// or no assignable cause found).
type Causes struct {
	Open, Explained int
}

// CountCauses counts the annotations by state.
func CountCauses(anns []store.Annotation) Causes {
	var c Causes
	for _, an := range anns {
		if an.Closed || an.NoCauseFound {
			c.Explained++
		} else {
			c.Open++
		}
	}
	return c
}

// Oldest sorts lots needing attention oldest first (then by process and
// lot id, so that the order is the same on every reading).
func Oldest(ls []Lot) {
	slices.SortStableFunc(ls, func(a, b Lot) int {
		if c := a.Time.Compare(b.Time); c != 0 {
			return c
		}
		if a.ProcessID != b.ProcessID {
			return cmpInt(a.ProcessID, b.ProcessID)
		}
		return cmpInt(a.LotID, b.LotID)
	})
}

func cmpInt(a, b int64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}
