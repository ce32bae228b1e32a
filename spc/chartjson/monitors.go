package chartjson

import "lotwatch/spc"

// CUSUM is a CUSUM monitor's design and its statistic after each lot, in
// the order of the lots.
type CUSUM struct {
	P0   Num `json:"p0"`
	P1   Num `json:"p1"`
	H    Num `json:"h"`
	ARL0 Num `json:"arl0"`
	ARL1 Num `json:"arl1"`
	// ARL0Target is the in-control ARL h was designed for, when it was
	// (not when the decision interval was given).
	ARL0Target *Num          `json:"arl0_target,omitempty"`
	Points     []CUSUMPoint  `json:"points"`
	Signals    []CUSUMSignal `json:"signals"`
}

// CUSUMPoint is the CUSUM after one lot.
type CUSUMPoint struct {
	Lot    string `json:"lot"`
	S      Num    `json:"s"`
	Signal bool   `json:"signal"`
}

// CUSUMSignal names the lot where S reached h and the estimated start
// of the change.
type CUSUMSignal struct {
	Lot   string `json:"lot"`
	Start string `json:"start"`
}

// CUSUMOf renders c and what it gave over the lots (CUSUM.Run).
func CUSUMOf(c *spc.CUSUM, pts []spc.CUSUMPoint, sigs []spc.CUSUMSignal) *CUSUM {
	out := &CUSUM{P0: Num(c.P0), P1: Num(c.P1), H: Num(c.H), ARL0: Num(c.ARL0), ARL1: Num(c.ARL1),
		Points: make([]CUSUMPoint, len(pts)), Signals: make([]CUSUMSignal, len(sigs))}
	for i, p := range pts {
		out.Points[i] = CUSUMPoint{Lot: p.Lot, S: Num(p.S), Signal: p.Signal}
	}
	for i, s := range sigs {
		out.Signals[i] = CUSUMSignal{Lot: s.LotID, Start: s.StartID}
	}
	return out
}

// EWMA is an EWMA monitor's settings and its statistic and limits after
// each lot, in the order of the lots.
type EWMA struct {
	P0     Num `json:"p0"`
	Lambda Num `json:"lambda"`
	Width  Num `json:"width"`
	// ARL0 is the mean number of lots between false alarms at the centre
	// (spc.EWMA.ARL); null when not worked out. ARL0Target is the
	// in-control ARL the width was designed for, when it was.
	ARL0       *Num        `json:"arl0,omitempty"`
	ARL0Target *Num        `json:"arl0_target,omitempty"`
	Points     []EWMAPoint `json:"points"`
}

// EWMAPoint is the EWMA and its limits after one lot.
type EWMAPoint struct {
	Lot    string `json:"lot"`
	Z      Num    `json:"z"`
	UCL    Num    `json:"ucl"`
	LCL    Num    `json:"lcl"`
	Signal bool   `json:"signal"`
}

// EWMAOf renders e and what it gave over the lots (EWMA.Run).
func EWMAOf(e spc.EWMA, pts []spc.EWMAPoint) *EWMA {
	out := &EWMA{P0: Num(e.P0), Lambda: Num(e.Lambda), Width: Num(e.L), Points: make([]EWMAPoint, len(pts))}
	if e.ARL0 > 0 {
		arl0 := Num(e.ARL0)
		out.ARL0 = &arl0
	}
	for i, p := range pts {
		out.Points[i] = EWMAPoint{Lot: p.Lot, Z: Num(p.Z), UCL: Num(p.UCL), LCL: Num(p.LCL), Signal: p.Signal}
	}
	return out
}
