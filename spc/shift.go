package spc

import (
	"fmt"
	"strconv"
)

// Monitors are the CUSUM and EWMA watched beside a chart for small
// sustained shifts. A zero CUSUMShift means no CUSUM, a zero EWMALambda
// no EWMA.
type Monitors struct {
	// CUSUMShift is the rate p1 the CUSUM is to catch (see CUSUM),
	// CUSUMARL0 the in-control ARL it is designed for (0 means 370), and
	// CUSUMH a decision interval fixed beforehand, as a frozen limit set
	// holds it (0 designs one).
	CUSUMShift, CUSUMARL0, CUSUMH float64
	// EWMALambda and EWMAWidth are the EWMA's weight and width (see EWMA).
	// A zero width is designed for the in-control ARL EWMAARL0 over the
	// lot sizes (DesignEWMA), or is DefaultEWMAWidth when EWMAARL0 is 0
	// too; a frozen limit set holds the width designed.
	EWMALambda, EWMAWidth, EWMAARL0 float64
}

// DefaultARL0 is the in-control average run length a CUSUM is designed
// for unless told otherwise: about that of a 3σ Shewhart chart (1/0.0027).
const DefaultARL0 = 370

// EWMA returns the EWMA of m for chart ch from the centre p0: its width
// designed over the lot sizes when m asks for that (what a frozen limit
// set then holds), and its ARL0 worked out over them.
func (m Monitors) EWMA(ch Chart, p0 float64, sizes []int64) (*EWMA, error) {
	if m.EWMAWidth == 0 && m.EWMAARL0 != 0 {
		return DesignEWMA(ch, p0, m.EWMALambda, sizes, m.EWMAARL0)
	}
	width := m.EWMAWidth
	if width == 0 {
		width = DefaultEWMAWidth
	}
	if err := CheckEWMA(ch, p0, m.EWMALambda, width); err != nil {
		return nil, err
	}
	e := &EWMA{Chart: ch, P0: p0, Lambda: m.EWMALambda, L: width}
	if len(sizes) > 0 {
		e.ARL0 = e.ARL(p0, sizes)
	}
	return e, nil
}

// On reports whether any monitor is set.
func (m Monitors) On() bool { return m.CUSUMShift != 0 || m.EWMALambda != 0 }

// ShiftWatch is what the monitors found over the lots of an analysis.
type ShiftWatch struct {
	CUSUM        *CUSUM // nil without a CUSUM
	CUSUMPoints  []CUSUMPoint
	CUSUMSignals []CUSUMSignal
	EWMA         *EWMA // nil without an EWMA
	EWMAPoints   []EWMAPoint
}

// WatchShifts runs the monitors m over the lots of a (the same lots, in
// order) from the chart's centre a.Rate, the CUSUM's run lengths over the
// lot sizes sizes, and adds their findings to a as signals of the rules
// RuleCUSUM and RuleEWMA (kind "shift"): a CUSUM signal covers the lots
// from the estimated start of the change to the lot where S reached h; an
// EWMA signal the lots in a row whose EWMA is beyond its limits. The
// lots taking part are marked like those of the run rules.
func WatchShifts(a *Analysis, lots []Lot, m Monitors, sizes []int64) (*ShiftWatch, error) {
	w := &ShiftWatch{}
	if !m.On() {
		return w, nil
	}
	a.Shift = w
	if len(lots) != len(a.Points) {
		return nil, fmt.Errorf("%d lots for an analysis of %d", len(lots), len(a.Points))
	}
	p0 := a.Rate
	if m.CUSUMShift != 0 {
		arl0 := m.CUSUMARL0
		if arl0 == 0 {
			arl0 = DefaultARL0
		}
		c, err := DesignCUSUM(a.Chart, p0, m.CUSUMShift, sizes, arl0, m.CUSUMH)
		if err != nil {
			return nil, fmt.Errorf("CUSUM: %w", err)
		}
		w.CUSUM = c
		w.CUSUMPoints, w.CUSUMSignals = c.Run(lots)
		side := int8(1)
		if c.P1 < c.P0 {
			side = -1
		}
		for _, s := range w.CUSUMSignals {
			a.addSignal(Signal{Rule: RuleCUSUM, First: s.Start, Start: s.Lot, Last: s.Lot, Side: side,
				Description: fmt.Sprintf("CUSUM for a %s to %s reached h = %.2f at lot %s; the change probably began at lot %s",
					map[int8]string{1: "rise", -1: "fall"}[side], strconv.FormatFloat(c.P1, 'g', 4, 64), c.H, s.LotID, s.StartID)})
		}
	}
	if m.EWMALambda != 0 {
		e, err := m.EWMA(a.Chart, p0, sizes)
		if err != nil {
			return nil, fmt.Errorf("EWMA: %w", err)
		}
		w.EWMA = e
		w.EWMAPoints = e.Run(lots)
		for i := 0; i < len(w.EWMAPoints); {
			p := w.EWMAPoints[i]
			if !p.Signal {
				i++
				continue
			}
			above := p.Z > p.UCL
			j := i
			for j+1 < len(w.EWMAPoints) && w.EWMAPoints[j+1].Signal && (w.EWMAPoints[j+1].Z > w.EWMAPoints[j+1].UCL) == above {
				j++
			}
			side, where := int8(1), "above its upper"
			if !above {
				side, where = -1, "below its lower"
			}
			what := "lot"
			if j > i {
				what = strconv.Itoa(j-i+1) + " lots in a row"
			}
			a.addSignal(Signal{Rule: RuleEWMA, First: i, Start: i, Last: j, Side: side,
				Description: fmt.Sprintf("EWMA of the rates (λ %g) %s limit for %s", e.Lambda, where, what)})
			i = j + 1
		}
	}
	return w, nil
}

// addSignal appends sg with its lots, marking the points taking part.
func (a *Analysis) addSignal(sg Signal) {
	sg.Lots = make([]string, 0, sg.Last-sg.First+1)
	for j := sg.First; j <= sg.Last; j++ {
		a.Points[j].Rules |= sg.Rule.Set()
		sg.Lots = append(sg.Lots, a.Points[j].Lot.Code)
	}
	a.Signals = append(a.Signals, sg)
}
