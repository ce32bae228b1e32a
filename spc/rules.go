package spc

import (
	"fmt"
	"math"
	"math/bits"
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
	RuleNelson8             // 8 lots in a row beyond 1σ, on either side
	numRules
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
	"Nelson test 8: 8 lots in a row more than 1σ from the centre line, on either side",
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
		for r, n := range ruleNames {
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

// ruleEngine judges points one at a time with O(1) work and no allocation
// per lot; it allocates only when a signal starts or grows, and then
// only when a list of signals or lot IDs outgrows its capacity.
//
// Conventions (documented on Analyze): a pattern signals at the lot that
// completes it, and that lot must itself take part in the pattern (for
// "2 of 3" the current lot is one of the two); "beyond" and "within" are
// strict (a z exactly on a zone boundary is neither); z = 0 is on neither
// side and breaks a same-side run; equal successive z break a trend and an
// alternation. A signal that continues or repeats on the same side while
// overlapping or touching the open signal of the same rule extends that
// signal instead of adding another.
type ruleEngine struct {
	set            RuleSet
	regs           ruleRegs
	runUp, runDown int
	alt            int
	lastDir        int8
	runInside      int
	runOutside     int
	prevZ          float64
	havePrev       bool
	open           [numRules]int
	// signals are the signals found so far, without their lots and
	// descriptions, which finish adds; they hold no pointer, so that
	// growing the list neither clears nor scans memory.
	signals []finding

	// pts are the points judged, when known while stepping: emit then
	// marks their Rules and gathers the IDs of the lots of each rule's
	// signals, in order, into ids; otherwise finish does.
	pts []Point
	ids [numRules][]string

	// Which state the selected rules need, fixed by reset, so that a
	// lot costs only the work of the rules chosen.
	zones, sides, nelson bool
	beyond               uint8 // 1 when rule 1 (WE or Nelson) is selected
	// z1 and z2 are the zone boundaries K/3 and 2K/3 of zk.
	zk, z1, z2 float64
}

func (e *ruleEngine) reset(set RuleSet) {
	*e = ruleEngine{set: set}
	for i := range e.open {
		e.open[i] = -1
	}
	e.zones = set&(RuleWE2.Set()|RuleNelson5.Set()|RuleWE3.Set()|RuleNelson6.Set()) != 0
	e.sides = set&(RuleWE4.Set()|RuleNelson2.Set()) != 0
	e.nelson = set&(RuleNelson3.Set()|RuleNelson4.Set()|RuleNelson7.Set()|RuleNelson8.Set()) != 0
	e.beyond = b2u(set&(RuleWE1.Set()|RuleNelson1.Set()) != 0)
	e.zk = math.NaN()
}

func b2u(b bool) uint8 {
	if b {
		return 1
	}
	return 0
}

// twoOfThree[w] is 1 when the current lot (bit 0) is beyond the zone and
// at least 2 of the 3 lots in w are; fourOfFive likewise for 4 of 5.
var twoOfThree, fourOfFive = func() (a [8]uint8, b [32]uint8) {
	for w := range a {
		a[w] = b2u(w&1 != 0 && bits.OnesCount8(uint8(w)) >= 2)
	}
	for w := range b {
		b[w] = b2u(w&1 != 0 && bits.OnesCount8(uint8(w)) >= 4)
	}
	return
}()

// step judges point i. k is the limit width in σ that sets the zones.
//
// The state of every selected rule is updated without branching on z;
// only when some selected rule may be met at this lot does fire look at
// the rules one by one.
func (e *ruleEngine) step(i int, p *Point, k float64) {
	if e.set == 0 {
		return
	}
	z := p.Z
	if k != e.zk {
		e.zk, e.z1, e.z2 = k, k/3, 2*k/3
	}
	var may uint8
	e.regs, may = e.regs.advance(z, e.z1, e.z2, e.zones, e.sides)
	may |= e.beyond & (b2u(p.Above) | b2u(p.Below))
	if e.nelson {
		e.stepNelson(z, e.z1)
		may |= b2u(e.runUp >= 5) | b2u(e.runDown >= 5) | b2u(e.alt >= 13) | b2u(e.runInside >= 15) | b2u(e.runOutside >= 8)
	}
	if may != 0 {
		e.fire(i, p, k)
	}
}

// ruleRegs is the state of the zone and same-side rules (Western
// Electric 2–4, Nelson 2, 5 and 6), small enough for a loop to keep in
// registers.
type ruleRegs struct {
	// zones holds four shift registers of the last lots, bit 0 = the
	// current lot, one per byte: beyond +2σ, beyond −2σ, beyond +1σ,
	// beyond −1σ.
	zones              uint32
	runAbove, runBelow int
}

// The bytes of ruleRegs.zones.
const (
	hi2Shift = 0
	lo2Shift = 8
	hi1Shift = 16
	lo1Shift = 24
)

// advance takes in the z of the next lot, updating the zone registers
// when zones is set and the same-side runs when sides is set, and
// reports 1 when a zone or same-side rule may be met at this lot.
func (r ruleRegs) advance(z, z1, z2 float64, zones, sides bool) (ruleRegs, uint8) {
	var may uint8
	if zones {
		r.zones = r.zones<<1&0xfefefefe | uint32(b2u(z > z2))<<hi2Shift | uint32(b2u(z < -z2))<<lo2Shift |
			uint32(b2u(z > z1))<<hi1Shift | uint32(b2u(z < -z1))<<lo1Shift
		may = twoOfThree[r.zones>>hi2Shift&7] | twoOfThree[r.zones>>lo2Shift&7] |
			fourOfFive[r.zones>>hi1Shift&31] | fourOfFive[r.zones>>lo1Shift&31]
	}
	if sides {
		r.runAbove = (r.runAbove + 1) * int(b2u(z > 0))
		r.runBelow = (r.runBelow + 1) * int(b2u(z < 0))
		may |= b2u(r.runAbove >= 8) | b2u(r.runBelow >= 8)
	}
	return r, may
}

// advanceBits is advance for a lot whose comparisons of z are already
// made: zones holds its bits of the zone registers (0 when no zone rule
// is selected) and flags its recPos and recNeg bits (0 when no same-side
// rule is selected).
func (r ruleRegs) advanceBits(zones uint32, flags uint8) (ruleRegs, uint8) {
	r.zones = r.zones<<1&0xfefefefe | zones
	may := twoOfThree[r.zones>>hi2Shift&7] | twoOfThree[r.zones>>lo2Shift&7] |
		fourOfFive[r.zones>>hi1Shift&31] | fourOfFive[r.zones>>lo1Shift&31]
	r.runAbove = (r.runAbove + 1) * int(flags>>recPosBit&1)
	r.runBelow = (r.runBelow + 1) * int(flags>>recNegBit&1)
	may |= b2u(r.runAbove >= 8) | b2u(r.runBelow >= 8)
	return r, may
}

// stepNelson updates the trend, alternation and zone-run counts.
func (e *ruleEngine) stepNelson(z, z1 float64) {
	if e.havePrev {
		var dir int8
		switch {
		case z > e.prevZ:
			dir = 1
			e.runUp++
			e.runDown = 0
		case z < e.prevZ:
			dir = -1
			e.runDown++
			e.runUp = 0
		default:
			e.runUp, e.runDown = 0, 0
		}
		switch {
		case dir == 0:
			e.alt = 0
		case e.lastDir != 0 && dir == -e.lastDir:
			e.alt++
		default:
			e.alt = 1
		}
		e.lastDir = dir
	}
	e.prevZ, e.havePrev = z, true
	e.runInside = (e.runInside + 1) * int(b2u(z < z1 && z > -z1))
	e.runOutside = (e.runOutside + 1) * int(b2u(z > z1 || z < -z1))
}

// fire emits the signals of the selected rules met at lot i.
func (e *ruleEngine) fire(i int, p *Point, k float64) {
	s := e.set
	if s&(RuleWE1.Set()|RuleNelson1.Set()) != 0 && (p.Above || p.Below) {
		side := int8(1)
		if p.Below {
			side = -1
		}
		e.emitBoth(RuleWE1, RuleNelson1, i, i, side, 1, k)
	}
	if s&(RuleWE2.Set()|RuleNelson5.Set()) != 0 {
		e.window(RuleWE2, RuleNelson5, i, uint8(e.regs.zones>>hi2Shift), 0b111, 2, 1, k)
		e.window(RuleWE2, RuleNelson5, i, uint8(e.regs.zones>>lo2Shift), 0b111, 2, -1, k)
	}
	if s&(RuleWE3.Set()|RuleNelson6.Set()) != 0 {
		e.window(RuleWE3, RuleNelson6, i, uint8(e.regs.zones>>hi1Shift), 0b11111, 4, 1, k)
		e.window(RuleWE3, RuleNelson6, i, uint8(e.regs.zones>>lo1Shift), 0b11111, 4, -1, k)
	}
	if e.regs.runAbove >= 8 {
		if s.Has(RuleWE4) {
			e.emit(RuleWE4, i-e.regs.runAbove+1, i, 1, 1, k)
		}
		if e.regs.runAbove >= 9 && s.Has(RuleNelson2) {
			e.emit(RuleNelson2, i-e.regs.runAbove+1, i, 1, 1, k)
		}
	}
	if e.regs.runBelow >= 8 {
		if s.Has(RuleWE4) {
			e.emit(RuleWE4, i-e.regs.runBelow+1, i, -1, 1, k)
		}
		if e.regs.runBelow >= 9 && s.Has(RuleNelson2) {
			e.emit(RuleNelson2, i-e.regs.runBelow+1, i, -1, 1, k)
		}
	}
	if s.Has(RuleNelson3) {
		if e.runUp >= 5 {
			e.emit(RuleNelson3, i-e.runUp, i, 1, 1, k)
		} else if e.runDown >= 5 {
			e.emit(RuleNelson3, i-e.runDown, i, -1, 1, k)
		}
	}
	if e.alt >= 13 && s.Has(RuleNelson4) {
		e.emit(RuleNelson4, i-e.alt, i, 0, 1, k)
	}
	if e.runInside >= 15 && s.Has(RuleNelson7) {
		e.emit(RuleNelson7, i-e.runInside+1, i, 0, 1, k)
	}
	if e.runOutside >= 8 && s.Has(RuleNelson8) {
		e.emit(RuleNelson8, i-e.runOutside+1, i, 0, 1, k)
	}
}

// window checks a "need of width" pattern: the current lot (bit 0) takes
// part and at least need of the lots in mask do.
func (e *ruleEngine) window(we, nelson Rule, i int, reg, mask uint8, need int, side int8, k float64) {
	w := reg & mask
	if w&1 == 0 || bits.OnesCount8(w) < need {
		return
	}
	first := i - (7 - bits.LeadingZeros8(w)) // earliest lot taking part
	e.emitBoth(we, nelson, first, i, side, bits.OnesCount8(w), k)
}

func (e *ruleEngine) emitBoth(we, nelson Rule, first, last int, side int8, hits int, k float64) {
	if e.set.Has(we) {
		e.emit(we, first, last, side, hits, k)
	}
	if e.set.Has(nelson) {
		e.emit(nelson, first, last, side, hits, k)
	}
}

// emit records that rule r is met over lots first..last. hits is the
// number of lots taking part when a signal starts; an extension adds one
// (the current lot).
//
// The lots newly covered are marked, and their IDs gathered, now, while
// their points are still in the cache. A rule's open signal is its
// latest, so its IDs are the end of the rule's list.
func (e *ruleEngine) emit(r Rule, first, last int, side int8, hits int, k float64) {
	if o := e.open[r]; o >= 0 {
		sg := &e.signals[o]
		if sg.Side == side && first <= sg.Last+1 {
			if first < sg.First {
				e.prepend(r, first, sg.First, sg.Last-sg.First+1)
				sg.First = first
			}
			e.cover(r, sg.Last+1, last)
			sg.Last = last
			sg.hits++
			return
		}
	}
	e.open[r] = len(e.signals)
	e.signals = append(e.signals, finding{Rule: r, First: first, Last: last, Side: side, hits: hits, k: k})
	e.cover(r, first, last)
}

// cover marks lots from..to as taking part in rule r and appends their
// IDs to the rule's list. It does nothing while the points are unknown.
func (e *ruleEngine) cover(r Rule, from, to int) {
	if e.pts == nil {
		return
	}
	bit := r.Set()
	for j := from; j <= to; j++ {
		e.pts[j].Rules |= bit
		e.ids[r] = append(e.ids[r], e.pts[j].Lot.Code)
	}
}

// prepend puts the lots from up to before in front of the last have IDs
// of rule r's list.
func (e *ruleEngine) prepend(r Rule, from, before, have int) {
	if e.pts == nil {
		return
	}
	add := before - from
	ids := e.ids[r]
	at := len(ids) - have
	ids = append(ids, make([]string, add)...)
	copy(ids[at+add:], ids[at:at+have])
	for j := from; j < before; j++ {
		e.pts[j].Rules |= r.Set()
		ids[at+j-from] = e.pts[j].Lot.Code
	}
	e.ids[r] = ids
}

// finish fills in the lots and descriptions of the signals of the points
// pts, marking the points first if the engine did not know them. The lot
// IDs of the signals of one rule share that rule's list (each Lots slice
// is capped, so appending to one copies it) and the descriptions one
// string, so that the cost in allocations does not grow with the number
// of signals.
func (e *ruleEngine) finish(pts []Point) []Signal {
	if len(e.signals) == 0 {
		return nil
	}
	if e.pts == nil {
		e.pts = pts
		for si := range e.signals {
			sg := &e.signals[si]
			e.cover(sg.Rule, sg.First, sg.Last)
		}
	}
	var from [numRules]int
	text := make([]byte, 0, 64*len(e.signals))
	ends := make([]int, len(e.signals))
	out := make([]Signal, len(e.signals))
	for si := range e.signals {
		f := &e.signals[si]
		sg := &out[si]
		*sg = Signal{Rule: f.Rule, First: f.First, Last: f.Last, Side: f.Side, hits: f.hits, k: f.k}
		at, n := from[sg.Rule], sg.Last-sg.First+1
		sg.Lots = e.ids[sg.Rule][at : at+n : at+n]
		from[sg.Rule] += n
		text = sg.appendDescription(text)
		ends[si] = len(text)
	}
	all := string(text)
	at := 0
	for si := range out {
		out[si].Description = all[at:ends[si]]
		at = ends[si]
	}
	return out
}

// finding is a Signal while the engine runs: its rule, lots, side, the
// lots taking part and the limit width.
type finding struct {
	Rule        Rule
	Side        int8
	First, Last int
	hits        int
	k           float64
}

// appendDescription appends the signal in plain words to b.
func (sg *Signal) appendDescription(b []byte) []byte {
	n := sg.Last - sg.First + 1
	where := "above"
	if sg.Side < 0 {
		where = "below"
	}
	num := func(b []byte, v int) []byte { return strconv.AppendInt(b, int64(v), 10) }
	zone := func(b []byte, z float64) []byte { return append(strconv.AppendFloat(b, z, 'g', 3, 64), "σ"...) }
	switch sg.Rule {
	case RuleWE1, RuleNelson1:
		limit := "upper"
		if sg.Side < 0 {
			limit = "lower"
		}
		if n == 1 {
			return append(append(append(append(append(b, "1 lot "...), where...), " the "...), limit...), " control limit"...)
		}
		b = append(num(b, n), " lots in a row "...)
		return append(append(append(append(b, where...), " the "...), limit...), " control limit"...)
	case RuleWE2, RuleNelson5, RuleWE3, RuleNelson6:
		z, tail := 2*sg.k/3, ", at least 2 in every 3"
		wide := n > 3
		if sg.Rule == RuleWE3 || sg.Rule == RuleNelson6 {
			z, tail, wide = sg.k/3, ", at least 4 in every 5", n > 5
		}
		if sg.hits < n {
			b = append(num(b, sg.hits), " of "...)
		}
		b = append(num(b, n), " lots in a row more than "...)
		b = append(append(append(zone(b, z), ' '), where...), " the centre line"...)
		if wide {
			b = append(b, tail...)
		}
		return b
	case RuleWE4, RuleNelson2:
		return append(append(append(num(b, n), " lots in a row "...), where...), " the centre line"...)
	case RuleNelson3:
		if sg.Side > 0 {
			return append(num(b, n), " lots in a row each higher than the one before"...)
		}
		return append(num(b, n), " lots in a row each lower than the one before"...)
	case RuleNelson4:
		return append(num(b, n), " lots in a row alternating up and down"...)
	case RuleNelson7:
		return append(zone(append(num(b, n), " lots in a row within "...), sg.k/3), " of the centre line"...)
	case RuleNelson8:
		return append(zone(append(num(b, n), " lots in a row more than "...), sg.k/3), " from the centre line"...)
	}
	return append(b, sg.Rule.Describe()...)
}
