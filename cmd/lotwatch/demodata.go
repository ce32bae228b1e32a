package main

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"
	"time"
	"unicode"

	"gonum.org/v1/gonum/stat/distuv"

	"lotwatch/spc"
)

// The demo is set in Quillmoor Works, an invented plant that moulds
// housings, builds cable harnesses, paints panels and packs finished goods.
// Every figure below is made up and drawn from a seeded generator, so the
// demo is the same on every machine.

// demoSeed fixes the demo data set.
const demoSeed = 20261201

// demoZone is the invented plant's time zone.
const demoZone = "Europe/Berlin"

// demoWeeks is how far back the demo history reaches.
const demoWeeks = 13

// demoProcess is one charted process of the demo plant with its lots.
type demoProcess struct {
	Name        string
	Description string
	Chart       spc.Chart
	Method      spc.Method
	Rules       string
	Categories  []string
	// FreezeAfter > 0 freezes a limit set from the first FreezeAfter
	// weeks of lots; 0 leaves the process on trial limits.
	FreezeAfter int
	Lots        []demoLot
	// Causes are assignable causes recorded on particular lots.
	Causes []demoCause
}

// demoLot is one generated lot.
type demoLot struct {
	Code       string
	Time       time.Time
	Shift      string
	Inspected  int64
	Count      int64
	Categories map[string]int64
	Inspector  string
	Note       string
}

// demoCause is an assignable cause recorded against a demo lot.
type demoCause struct {
	Lot    string
	Cause  string
	Action string
	Closed bool
}

// shift is one of the plant's three shifts.
type shift struct {
	name  string
	start int // hour of day
}

var demoShifts = []shift{{"early", 6}, {"late", 14}, {"night", 22}}

var demoInspectors = []string{"badge 114", "badge 207", "badge 318", "badge 425"} // inspectors by badge number

// demoPlant generates the demo plant's processes and lots for the
// demoWeeks weeks that end on the day of end (in the plant's zone). The
// values depend only on the seed; end only places them in time, so that
// the demo always shows "today".
// demoEnd is the end of the demo plant's record: the last of its lots
// comes before it. The demo database, `demo --csv` and testdata/demo (the
// README's worked example) are all drawn up to it, so that a lot code holds
// the same values wherever a new user meets it; the demo server's clock
// starts there (demoClock).
var demoEnd = time.Date(2026, 11, 27, 18, 0, 0, 0, time.UTC)

// demoClock is the clock of the demo server: demoEnd when the server
// starts, running on from there, so that "today" on the board is the demo
// plant's last day.
func demoClock(started time.Time) func() time.Time {
	return func() time.Time { return demoEnd.Add(time.Since(started)) }
}

func demoPlant(end time.Time, seed uint64) []demoProcess {
	loc, err := time.LoadLocation(demoZone)
	if err != nil {
		loc = time.UTC
	}
	end = end.In(loc)
	lastDay := time.Date(end.Year(), end.Month(), end.Day(), 0, 0, 0, 0, loc)
	firstDay := lastDay.AddDate(0, 0, -7*demoWeeks+1)
	rng := rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15))

	g := demoGen{rng: rng, first: firstDay, last: lastDay, cutoff: end}
	return []demoProcess{
		g.housings(),
		g.harness(),
		g.panels(),
		g.packing(),
	}
}

// demoGen draws the demo lots.
type demoGen struct {
	rng         *rand.Rand
	first, last time.Time
	cutoff      time.Time // no lot later than this instant
}

// each calls fn for every lot in time order: one to perShift lots a
// shift, each with a code made of the prefix, the date and a number within
// the day.
func (g demoGen) each(prefix string, perShift int, fn func(code string, t time.Time, sh string, day, days int)) {
	days := int(g.last.Sub(g.first).Hours()/24+0.5) + 1
	for d := 0; d < days; d++ {
		day := g.first.AddDate(0, 0, d)
		seq := 0
		for _, s := range demoShifts {
			k := 1 + g.rng.IntN(perShift)
			for i := 0; i < k; i++ {
				minute := 30 + i*(420/k) + g.rng.IntN(40)
				t := time.Date(day.Year(), day.Month(), day.Day(), s.start, 0, 0, 0, day.Location()).Add(time.Duration(minute) * time.Minute)
				if t.After(g.cutoff) {
					return
				}
				seq++
				code := fmt.Sprintf("%s-%s-%02d", prefix, day.Format("060102"), seq)
				fn(code, t, s.name, d, days)
			}
		}
	}
}

func (g demoGen) binomial(n int64, p float64) int64 {
	return int64(distuv.Binomial{N: float64(n), P: p, Src: g.rng}.Rand())
}

func (g demoGen) poisson(mean float64) int64 {
	if mean <= 0 {
		return 0
	}
	return int64(distuv.Poisson{Lambda: mean, Src: g.rng}.Rand())
}

// split shares count among categories by their weights.
func (g demoGen) split(count int64, cats []string, weights []float64) map[string]int64 {
	out := make(map[string]int64, len(cats))
	for _, c := range cats {
		out[c] = 0
	}
	var total float64
	for _, w := range weights {
		total += w
	}
	for i := int64(0); i < count; i++ {
		u := g.rng.Float64() * total
		for j, w := range weights {
			if u < w || j == len(weights)-1 {
				out[cats[j]]++
				break
			}
			u -= w
		}
	}
	return out
}

func (g demoGen) inspector() string { return demoInspectors[g.rng.IntN(len(demoInspectors))] }

// housings: injection-moulded housings on line 2, p chart with varying
// lot sizes, stable at about 2.4 % with one spike from a blocked vent.
func (g demoGen) housings() demoProcess {
	p := demoProcess{
		Name:        "Line 2 housing visual",
		Description: "Moulded housing HX-40, visual inspection after de-gating. Sample of each lot, size varies with the lot.",
		Chart:       spc.ChartP,
		Method:      spc.MethodSigma,
		Rules:       "we",
		Categories:  []string{"short shot", "flash", "sink mark", "scratch", "discolour"},
		FreezeAfter: 6,
	}
	weights := []float64{0.20, 0.35, 0.20, 0.15, 0.10}
	var spikeDay = -1
	g.each("H2", 2, func(code string, t time.Time, sh string, day, days int) {
		if spikeDay < 0 {
			spikeDay = days - 19
		}
		n := int64(150 + 50*g.rng.IntN(6)) // 150 … 400 units
		rate := 0.024
		note := ""
		if day == spikeDay && sh == "late" && len(p.Causes) == 0 {
			rate = 0.11
			note = "many short shots on cavity 3"
			p.Causes = append(p.Causes, demoCause{
				Lot:    code,
				Cause:  "Vent on cavity 3 blocked by residue after the material change.",
				Action: "Vent cleaned; vent check added to the start-up list of the mould.",
				Closed: true,
			})
		}
		d := g.binomial(n, rate)
		w := weights
		if note != "" {
			w = []float64{0.8, 0.1, 0.05, 0.03, 0.02}
		}
		p.Lots = append(p.Lots, demoLot{Code: code, Time: t, Shift: sh, Inspected: n, Count: d,
			Categories: g.split(d, p.Categories, w), Inspector: g.inspector(), Note: note})
	})
	return p
}

// harness: cable harness continuity test on line 4, p chart. The crimp die
// wears during the last three weeks and the fraction nonconforming drifts
// from 1.2 % to about 2.8 %; no limit set is frozen yet.
func (g demoGen) harness() demoProcess {
	p := demoProcess{
		Name:        "Line 4 harness continuity",
		Description: "Cable harness CB-7, electrical continuity test of every harness in the lot.",
		Chart:       spc.ChartP,
		Method:      spc.MethodSigma,
		Rules:       "nelson",
		Categories:  []string{"open circuit", "crimp height", "wrong pin", "insulation damage"},
	}
	g.each("C4", 1, func(code string, t time.Time, sh string, day, days int) {
		n := int64(80 + g.rng.IntN(41)) // 80 … 120 harnesses
		rate := 0.012
		if drift := days - 21; day >= drift {
			rate += 0.016 * float64(day-drift) / 21
		}
		d := g.binomial(n, rate)
		wear := math.Min(1, math.Max(0, float64(day-(days-21))/21))
		w := []float64{0.3, 0.25 + 0.5*wear, 0.25, 0.2}
		p.Lots = append(p.Lots, demoLot{Code: code, Time: t, Shift: sh, Inspected: n, Count: d,
			Categories: g.split(d, p.Categories, w), Inspector: g.inspector()})
	})
	return p
}

// panels: painted panels, u chart of surface defects per panel. The rate
// varies from lot to lot more than Poisson sampling explains (paint
// batches differ), so the process runs Laney u′ limits.
func (g demoGen) panels() demoProcess {
	p := demoProcess{
		Name:        "Paint shop panel surface",
		Description: "Painted side panel SP-3, surface audit of the panels in a rack; defects counted per panel.",
		Chart:       spc.ChartU,
		Method:      spc.MethodLaney,
		Rules:       "we",
		Categories:  []string{"run", "orange peel", "inclusion", "thin coat"},
		FreezeAfter: 8,
	}
	weights := []float64{0.25, 0.30, 0.35, 0.10}
	g.each("P1", 2, func(code string, t time.Time, sh string, day, days int) {
		n := int64(20 + g.rng.IntN(41)) // 20 … 60 panels
		// batch-to-batch variation: gamma-distributed rate around 0.35
		batch := distuv.Gamma{Alpha: 12, Beta: 12 / 0.35, Src: g.rng}.Rand()
		c := g.poisson(batch * float64(n))
		p.Lots = append(p.Lots, demoLot{Code: code, Time: t, Shift: sh, Inspected: n, Count: c,
			Categories: g.split(c, p.Categories, weights), Inspector: g.inspector()})
	})
	return p
}

// packing: final pack label check, np chart with a constant sample of 200
// labels per lot, stable at about 0.8 %.
func (g demoGen) packing() demoProcess {
	p := demoProcess{
		Name:        "Final pack label check",
		Description: "Shipping labels of finished cartons, 200 labels sampled from every lot.",
		Chart:       spc.ChartNP,
		Method:      spc.MethodExact,
		Rules:       "we",
		Categories:  []string{"unreadable barcode", "wrong label", "missing label"},
		FreezeAfter: 6,
	}
	weights := []float64{0.5, 0.3, 0.2}
	g.each("F9", 1, func(code string, t time.Time, sh string, day, days int) {
		const n = 200
		d := g.binomial(n, 0.008)
		p.Lots = append(p.Lots, demoLot{Code: code, Time: t, Shift: sh, Inspected: n, Count: d,
			Categories: g.split(d, p.Categories, weights), Inspector: g.inspector()})
	})
	return p
}

// demoFileName is the CSV file name of a demo process: its name in lower
// case with dashes.
func demoFileName(name string) string {
	var b strings.Builder
	dash := false
	for _, r := range strings.ToLower(name) {
		if unicode.IsLetter(r) || unicode.IsDigit(r) {
			b.WriteRune(r)
			dash = false
		} else if !dash && b.Len() > 0 {
			b.WriteByte('-')
			dash = true
		}
	}
	return strings.TrimSuffix(b.String(), "-") + ".csv"
}

// demoCSV renders a demo process's lots as an import-ready CSV file.
func demoCSV(dp demoProcess) []byte {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	count := "defects"
	if dp.Chart.CountsUnits() {
		count = "defective"
	}
	header := append([]string{"lot", "time", "shift", "inspected", count}, dp.Categories...)
	header = append(header, "inspector", "note")
	w.Write(header)
	for _, l := range dp.Lots {
		rec := []string{l.Code, l.Time.Format(time.RFC3339), l.Shift,
			strconv.FormatInt(l.Inspected, 10), strconv.FormatInt(l.Count, 10)}
		for _, c := range dp.Categories {
			rec = append(rec, strconv.FormatInt(l.Categories[c], 10))
		}
		rec = append(rec, l.Inspector, l.Note)
		w.Write(rec)
	}
	w.Flush()
	return buf.Bytes()
}
