package spc

import (
	"fmt"
	"strconv"
	"strings"
)

// Rule is one run rule for judging a sequence of standardized values zᵢ.
//
// The Western Electric rules are from the Western Electric Statistical
// Quality Control Handbook (1956); the Nelson tests from L. S. Nelson,
// "The Shewhart Control Chart — Tests for Special Causes", Journal of
// Quality Technology 16(4), 1984, 237–239.
type Rule uint8

// The run rules. Zones are measured in σ of the plotted statistic scaled
// to the limit width K: "1σ" is K/3 and "2σ" is 2K/3, so that with the
// usual K = 3 they are the textbook 1σ and 2σ and with other K they stay
// at one and two thirds of the way from the centre line to the limit.
const (
	RuleWE1     Rule = iota // one lot beyond the control limits
	RuleWE2                 // 2 of 3 lots in a row beyond 2σ on the same side
	RuleWE3                 // 4 of 5 lots in a row beyond 1σ on the same side
	RuleWE4                 // 8 lots in a row on the same side of the centre line
	RuleNelson1             // one lot beyond the control limits
	RuleNelson2             // 9 lots in a row on the same side of the centre line
	RuleNelson3             // 6 lots in a row steadily increasing or decreasing
	RuleNelson4             // 14 lots in a row alternating up and down
	RuleNelson5             // 2 of 3 lots in a row beyond 2σ on the same side
	RuleNelson6             // 4 of 5 lots in a row beyond 1σ on the same side
	RuleNelson7             // 15 lots in a row within 1σ of the centre line
	RuleNelson8             // 8 lots in a row beyond 1σ, on both sides of the centre line
	numRunRules

	// The shift monitors watched beside the chart (WatchShifts): their
	// signals are of kind "shift".
	RuleCUSUM = numRunRules     // the CUSUM reached its decision interval
	RuleEWMA  = numRunRules + 1 // the EWMA beyond its limits
	numRules  = numRunRules + 2
)

// RuleSet is a set of run rules, one bit per Rule. The zero value selects
// no rule.
type RuleSet uint32

// The named rule sets.
const (
	RulesNone   RuleSet = 0
	RulesWE     RuleSet = 1<<RuleWE1 | 1<<RuleWE2 | 1<<RuleWE3 | 1<<RuleWE4
	RulesNelson RuleSet = 1<<RuleNelson1 | 1<<RuleNelson2 | 1<<RuleNelson3 | 1<<RuleNelson4 |
		1<<RuleNelson5 | 1<<RuleNelson6 | 1<<RuleNelson7 | 1<<RuleNelson8
)

var ruleNames = [numRules]string{
	"we1", "we2", "we3", "we4",
	"nelson1", "nelson2", "nelson3", "nelson4", "nelson5", "nelson6", "nelson7", "nelson8",
	"cusum", "ewma",
}

var ruleDescriptions = [numRules]string{
	"Western Electric rule 1: a lot beyond a control limit",
	"Western Electric rule 2: 2 of 3 lots in a row more than 2σ from the centre line on the same side",
	"Western Electric rule 3: 4 of 5 lots in a row more than 1σ from the centre line on the same side",
	"Western Electric rule 4: 8 lots in a row on the same side of the centre line",
	"Nelson test 1: a lot beyond a control limit",
	"Nelson test 2: 9 lots in a row on the same side of the centre line",
	"Nelson test 3: 6 lots in a row steadily increasing or steadily decreasing",
	"Nelson test 4: 14 lots in a row alternating up and down",
	"Nelson test 5: 2 of 3 lots in a row more than 2σ from the centre line on the same side",
	"Nelson test 6: 4 of 5 lots in a row more than 1σ from the centre line on the same side",
	"Nelson test 7: 15 lots in a row within 1σ of the centre line, on either side",
	"Nelson test 8: 8 lots in a row more than 1σ from the centre line, on both sides of it",
	"CUSUM: the cumulative sum of evidence for the shift to watch for reached its decision interval",
	"EWMA: the weighted moving average of the rates beyond its limits",
}

// String returns the rule's short name, "we1" … "we4", "nelson1" … "nelson8".
func (r Rule) String() string {
	if r < numRules {
		return ruleNames[r]
	}
	return "rule" + strconv.Itoa(int(r))
}

// Describe returns what the rule looks for, in plain words. σ is the
// standard deviation of the plotted statistic scaled to the limit width
// (zones at K/3 and 2K/3).
func (r Rule) Describe() string {
	if r < numRules {
		return ruleDescriptions[r]
	}
	return "unknown rule"
}

// Kind is what sort of finding the rule's signals are: "limits" (a lot
// beyond a control limit), "run" (a pattern of the run rules) or "shift"
// (a CUSUM or EWMA signal).
func (r Rule) Kind() string {
	switch r {
	case RuleWE1, RuleNelson1:
		return "limits"
	case RuleCUSUM, RuleEWMA:
		return "shift"
	}
	return "run"
}

// Set returns the set holding only r.
func (r Rule) Set() RuleSet { return 1 << r }

// Has reports whether s holds r.
func (s RuleSet) Has(r Rule) bool { return s&(1<<r) != 0 }

// Rules returns the rules in s in their order of declaration.
func (s RuleSet) Rules() []Rule {
	var out []Rule
	for r := Rule(0); r < numRules; r++ {
		if s.Has(r) {
			out = append(out, r)
		}
	}
	return out
}

// String returns s as a comma list of rule names, or "none".
func (s RuleSet) String() string {
	if s&(1<<numRules-1) == 0 {
		return "none"
	}
	var b strings.Builder
	for _, r := range s.Rules() {
		if b.Len() > 0 {
			b.WriteByte(',')
		}
		b.WriteString(r.String())
	}
	return b.String()
}

// ParseRule returns the rule or shift monitor named exactly by name, as
// Rule.String writes it ("we1" … "nelson8", "cusum", "ewma").
func ParseRule(name string) (Rule, error) {
	for r, n := range ruleNames {
		if n == name {
			return Rule(r), nil
		}
	}
	return 0, fmt.Errorf("unknown rule %q", name)
}

// ParseRules returns the rule set named by s: "we" (Western Electric 1–4),
// "nelson" (Nelson 1–8), "none", or a comma list of these and single rule
// names such as "we1,nelson3".
func ParseRules(s string) (RuleSet, error) {
	var set RuleSet
	parts := strings.Split(s, ",")
	for _, part := range parts {
		name := strings.ToLower(strings.TrimSpace(part))
		switch name {
		case "none":
			if len(parts) > 1 {
				return 0, fmt.Errorf("run rules %q: \"none\" cannot be combined with other rules", s)
			}
			continue
		case "we":
			set |= RulesWE
			continue
		case "nelson":
			set |= RulesNelson
			continue
		}
		found := false
		for r, n := range ruleNames[:numRunRules] {
			if n == name {
				set |= Rule(r).Set()
				found = true
				break
			}
		}
		if !found {
			return 0, fmt.Errorf("unknown run rule %q (want we, nelson, none, or a list such as we1,nelson3)", strings.TrimSpace(part))
		}
	}
	return set, nil
}

// mark is what the run rules see of a judged lot: its z, the limit width
// K of the limits it was judged against (zones at K/3 and 2K/3) and
// whether it is beyond a control limit.
type mark struct {
	z, k         float64
	above, below bool
}

func (m mark) beyond1(side int8) bool { return float64(side)*m.z > m.k/3 }
func (m mark) beyond2(side int8) bool { return float64(side)*m.z > 2*m.k/3 }

// A finding is a rule met at the latest lot: the pattern covers the last
// span lots, on side (+1 above or increasing, −1 below or decreasing, 0
// either), with hits of them taking part. span 0 means not met.
type finding struct {
	span, hits int
	side       int8
}

// A check looks at the lots judged so far, h (the latest last), and
// reports whether its rule is met at the latest lot.
//
// Conventions: a pattern signals at the lot that completes it, and that
// lot must itself take part in the pattern (for "2 of 3" the current lot
// is one of the two); "beyond" and "within" are strict (a z exactly on a
// zone boundary is neither); z = 0 is on neither side and breaks a
// same-side run; equal successive z break a trend and an alternation. No
// check looks back more than 15 lots.
type check func(h []mark) finding

// beyondLimits: one lot beyond a control limit (Western Electric rule 1,
// Nelson test 1).
func beyondLimits(h []mark) finding {
	switch last := h[len(h)-1]; {
	case last.above:
		return finding{1, 1, 1}
	case last.below:
		return finding{1, 1, -1}
	}
	return finding{}
}

// twoOfThreeBeyond2: 2 of 3 lots in a row more than 2σ from the centre
// line on the same side (Western Electric rule 2, Nelson test 5).
func twoOfThreeBeyond2(h []mark) finding { return someOf(h, 2, 3, mark.beyond2) }

// fourOfFiveBeyond1: 4 of 5 lots in a row more than 1σ from the centre
// line on the same side (Western Electric rule 3, Nelson test 6).
func fourOfFiveBeyond1(h []mark) finding { return someOf(h, 4, 5, mark.beyond1) }

// someOf reports need of the last width lots beyond a zone on the side of
// the latest lot, which must be one of them; the pattern starts at the
// earliest of them.
func someOf(h []mark, need, width int, beyond func(mark, int8) bool) finding {
	for _, side := range []int8{1, -1} {
		if !beyond(h[len(h)-1], side) {
			continue
		}
		hits, span := 0, 0
		for back := 1; back <= width && back <= len(h); back++ {
			if beyond(h[len(h)-back], side) {
				hits, span = hits+1, back
			}
		}
		if hits >= need {
			return finding{span, hits, side}
		}
	}
	return finding{}
}

// eightOnOneSide: 8 lots in a row on the same side of the centre line
// (Western Electric rule 4).
func eightOnOneSide(h []mark) finding { return sameSide(h, 8) }

// nineOnOneSide: 9 lots in a row on the same side of the centre line
// (Nelson test 2).
func nineOnOneSide(h []mark) finding { return sameSide(h, 9) }

// sameSide reports the last n lots all above, or all below, the centre.
func sameSide(h []mark, n int) finding {
	if len(h) < n {
		return finding{}
	}
	for _, side := range []int8{1, -1} {
		if all(h[len(h)-n:], func(m mark) bool { return float64(side)*m.z > 0 }) {
			return finding{n, 1, side}
		}
	}
	return finding{}
}

// sixTrending: 6 lots in a row steadily increasing or steadily
// decreasing (Nelson test 3).
func sixTrending(h []mark) finding {
	const n = 6
	if len(h) < n {
		return finding{}
	}
	last := h[len(h)-n:]
	for _, side := range []int8{1, -1} {
		steady := true
		for j := 1; j < n && steady; j++ {
			steady = float64(side)*(last[j].z-last[j-1].z) > 0
		}
		if steady {
			return finding{n, 1, side}
		}
	}
	return finding{}
}

// fourteenAlternating: 14 lots in a row alternating up and down (Nelson
// test 4).
func fourteenAlternating(h []mark) finding {
	const n = 14
	if len(h) < n {
		return finding{}
	}
	last := h[len(h)-n:]
	for j := 1; j < n; j++ {
		d := last[j].z - last[j-1].z
		if d == 0 || j > 1 && (d > 0) == (last[j-1].z-last[j-2].z > 0) {
			return finding{}
		}
	}
	return finding{n, 1, 0}
}

// fifteenWithin1: 15 lots in a row within 1σ of the centre line, on
// either side (Nelson test 7).
func fifteenWithin1(h []mark) finding {
	const n = 15
	if len(h) < n || !all(h[len(h)-n:], func(m mark) bool { return m.z < m.k/3 && m.z > -m.k/3 }) {
		return finding{}
	}
	return finding{n, 1, 0}
}

// eightBeyond1: 8 lots in a row more than 1σ from the centre line, on
// both sides of it, none within 1σ (Nelson test 8, as Nelson 1984 reads;
// 8 on one side are already caught by tests 2, 5 and 6).
func eightBeyond1(h []mark) finding {
	const n = 8
	if len(h) < n {
		return finding{}
	}
	last := h[len(h)-n:]
	if !all(last, func(m mark) bool { return m.beyond1(1) || m.beyond1(-1) }) ||
		all(last, func(m mark) bool { return m.z > 0 }) || all(last, func(m mark) bool { return m.z < 0 }) {
		return finding{}
	}
	return finding{n, 1, 0}
}

func all(h []mark, ok func(mark) bool) bool {
	for _, m := range h {
		if !ok(m) {
			return false
		}
	}
	return true
}

// checks holds the check of each rule, in the order they are applied at
// a lot (which orders the signals found at the same lot).
var checks = []ruleCheck{
	{RuleWE1, beyondLimits},
	{RuleNelson1, beyondLimits},
	{RuleWE2, twoOfThreeBeyond2},
	{RuleNelson5, twoOfThreeBeyond2},
	{RuleWE3, fourOfFiveBeyond1},
	{RuleNelson6, fourOfFiveBeyond1},
	{RuleWE4, eightOnOneSide},
	{RuleNelson2, nineOnOneSide},
	{RuleNelson3, sixTrending},
	{RuleNelson4, fourteenAlternating},
	{RuleNelson7, fifteenWithin1},
	{RuleNelson8, eightBeyond1},
}

type ruleCheck struct {
	rule  Rule
	check check
}

// longestLook is the most lots a check looks back at.
const longestLook = 15

// applyRules applies the rules of set to the points in order and returns
// their signals; kOf gives the limit width of the limits point i was
// judged against. It marks each point with the rules whose signals it
// takes part in.
//
// A rule met again on the same side while its pattern overlaps or
// touches the rule's latest signal (first ≤ that signal's last lot + 1)
// extends that signal rather than starting another, so a run that keeps
// going is one signal however long it grows.
func applyRules(pts []Point, set RuleSet, kOf func(i int) float64) []Signal {
	if set == 0 {
		return nil
	}
	var active []ruleCheck
	for _, c := range checks {
		if set.Has(c.rule) {
			active = append(active, c)
		}
	}
	var signals []Signal
	var open [numRules]int // index of each rule's latest signal, +1; 0 none
	h := make([]mark, 0, 2*longestLook)
	for i := range pts {
		p := &pts[i]
		if len(h) == cap(h) {
			h = append(h[:0], h[len(h)-longestLook+1:]...)
		}
		h = append(h, mark{z: p.Z, k: kOf(i), above: p.Above, below: p.Below})
		for _, c := range active {
			f := c.check(h)
			if f.span == 0 {
				continue
			}
			first := i - f.span + 1
			if o := open[c.rule] - 1; o >= 0 && signals[o].Side == f.side && first <= signals[o].Last+1 {
				sg := &signals[o]
				sg.First = min(sg.First, first)
				sg.Last = i
				sg.hits++
				continue
			}
			signals = append(signals, Signal{Rule: c.rule, First: first, Start: i, Last: i, Side: f.side, hits: f.hits, k: kOf(i)})
			open[c.rule] = len(signals)
		}
	}
	for s := range signals {
		sg := &signals[s]
		sg.Lots = make([]string, 0, sg.Last-sg.First+1)
		for j := sg.First; j <= sg.Last; j++ {
			pts[j].Rules |= sg.Rule.Set()
			sg.Lots = append(sg.Lots, pts[j].Lot.Code)
		}
		sg.Description = sg.describe()
	}
	return signals
}

// describe says what the signal found, in plain words.
func (sg *Signal) describe() string {
	n := sg.Last - sg.First + 1
	where := "above"
	if sg.Side < 0 {
		where = "below"
	}
	zone := func(z float64) string { return strconv.FormatFloat(z, 'g', 3, 64) + "σ" }
	switch sg.Rule {
	case RuleWE1, RuleNelson1:
		limit := "upper"
		if sg.Side < 0 {
			limit = "lower"
		}
		if n == 1 {
			return fmt.Sprintf("1 lot %s the %s control limit", where, limit)
		}
		return fmt.Sprintf("%d lots in a row %s the %s control limit", n, where, limit)
	case RuleWE2, RuleNelson5:
		s := inRow(sg.hits, n) + fmt.Sprintf(" more than %s %s the centre line", zone(2*sg.k/3), where)
		if n > 3 {
			s += ", at least 2 in every 3"
		}
		return s
	case RuleWE3, RuleNelson6:
		s := inRow(sg.hits, n) + fmt.Sprintf(" more than %s %s the centre line", zone(sg.k/3), where)
		if n > 5 {
			s += ", at least 4 in every 5"
		}
		return s
	case RuleWE4, RuleNelson2:
		return fmt.Sprintf("%d lots in a row %s the centre line", n, where)
	case RuleNelson3:
		if sg.Side > 0 {
			return fmt.Sprintf("%d lots in a row each higher than the one before", n)
		}
		return fmt.Sprintf("%d lots in a row each lower than the one before", n)
	case RuleNelson4:
		return fmt.Sprintf("%d lots in a row alternating up and down", n)
	case RuleNelson7:
		return fmt.Sprintf("%d lots in a row within %s of the centre line", n, zone(sg.k/3))
	case RuleNelson8:
		return fmt.Sprintf("%d lots in a row more than %s from the centre line, on both sides of it", n, zone(sg.k/3))
	}
	return sg.Rule.Describe()
}

// inRow says how many of a zone signal's lots lie in the zone: "2 lots in a
// row" when all of them do, "2 of 3 lots in a row" otherwise.
func inRow(hits, n int) string {
	if hits == n {
		return fmt.Sprintf("%d lots in a row", n)
	}
	return fmt.Sprintf("%d of %d lots in a row", hits, n)
}
