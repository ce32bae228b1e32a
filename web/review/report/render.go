// Package report writes a weekly review (package review computes it) for
// people and programs: plain text, CSV, JSON, a self-contained HTML
// document to mail or print, and an HTML fragment for the web pages, with
// its charts as inline SVG. It computes no figure of its own.
package report

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"lotwatch/store/lotcsv"
	"math"
	"strconv"
	"strings"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web/attention"
	"lotwatch/web/review"
	"lotwatch/web/storejson"
)

// dateOnly formats the local date of a time.
const dateOnly = "2006-01-02"

// UnitWord names what a process counts: "nonconforming" (p, np) or
// "defects" (u, c).
func UnitWord(ch spc.Chart) string {
	if ch.CountsUnits() {
		return "nonconforming"
	}
	return "defects"
}

// FormatRate formats a rate for people: a percent for a fraction
// nonconforming ("2.31%"), defects per 100 units for u and c ("2.31 per
// 100 units"), "—" when there is none.
func FormatRate(ch spc.Chart, x float64) string {
	if math.IsNaN(x) {
		return "—"
	}
	v := review.Percent(x)
	if ch.CountsUnits() {
		return v + "%"
	}
	return v + " per 100 units"
}

// formatDiff formats a change of rate: percentage points for p, per 100
// units for u and c, with its sign.
func formatDiff(ch spc.Chart, x float64) string {
	if math.IsNaN(x) {
		return "—"
	}
	s := review.Percent(x)
	if x > 0 {
		s = "+" + s
	}
	if ch.CountsUnits() {
		return s + " points"
	}
	return s + " per 100 units"
}

// Interval describes the interval of a week's rate, e.g. "95% Wilson
// interval 1.80% to 2.95%".
func interval(pr *review.ProcessReview, level float64, st review.WeekStat) string {
	if !st.HasLots() {
		return "no lots inspected"
	}
	ch := pr.Process.Chart
	return fmt.Sprintf("%s %s interval %s to %s", review.LevelPercent(level), pr.Method, FormatRate(ch, st.Lower), FormatRate(ch, st.Upper))
}

// WriteText writes the review as plain text.
func WriteText(w io.Writer, r *review.Review) error {
	b := bufio.NewWriter(w)
	fmt.Fprintf(b, "Weekly review %s (Monday %s to Sunday %s, each process on its own clocks)\n",
		r.Week, r.FirstDay.Format(dateOnly), r.LastDay.Format(dateOnly))
	fmt.Fprintf(b, "Intervals at %s; rates of p and np processes by the %s interval, of u and c processes by the %s interval.\n",
		review.LevelPercent(r.Level), r.Method, spc.IntervalPoissonExact)
	if c := r.Method.Caveat(); c != "" {
		fmt.Fprintf(b, "Note: %s\n", c)
	}
	fmt.Fprintf(b, "Generated at %s.\n", r.Generated.UTC().Format("2006-01-02 15:04 UTC"))
	if len(r.Processes) == 0 {
		b.WriteString("\nNo processes to review.\n")
	}
	byConcern := r.ByConcern()
	if len(byConcern) > 0 {
		fmt.Fprintf(b, "\n%s\n", r.Glance().Sentence())
		b.WriteString("\nSummary (processes asking most for attention first):\n")
		if s := r.Chance.Sentence(r.FDR); s != "" {
			fmt.Fprintf(b, "%s\n", s)
		}
		for _, pr := range byConcern {
			ch := pr.Process.Chart
			shifts := ""
			if n := pr.Shifts(); n > 0 {
				shifts = fmt.Sprintf(", %s of a sustained small shift", review.Plural(n, "signal", "signals"))
			}
			fmt.Fprintf(b, "  %s: rate %s, change %s, %s; %d outside limits (%d no cause), %d signals (%d no cause)%s; %d lots of the record need attention\n",
				pr.Process.Name, FormatRate(ch, pr.Current.Rate), formatDiff(ch, pr.Change.Difference), pr.Change.VerdictText(),
				len(pr.OutOfLimits), pr.UnexplainedOut(), len(pr.Signals), pr.UnexplainedSignals(), shifts, pr.NeedAttention)
		}
	}
	for _, pr := range byConcern {
		writeProcessText(b, r, pr)
	}
	fmt.Fprintf(b, "\nCaution: %s\n", review.Caution)
	return b.Flush()
}

func writeProcessText(b *bufio.Writer, r *review.Review, pr *review.ProcessReview) {
	p := pr.Process
	ch := p.Chart
	loc := p.Location()
	fmt.Fprintf(b, "\n== %s (%s chart, %s) ==\n", p.Name, ch, p.TimeZone)
	for _, st := range []review.WeekStat{pr.Current, pr.Previous} {
		fmt.Fprintf(b, "%s: %d lots, %d inspected, %d %s", st.Week, st.Lots, st.Inspected, st.Count, UnitWord(ch))
		if st.HasLots() {
			fmt.Fprintf(b, ", rate %s (%s)", FormatRate(ch, st.Rate), interval(pr, r.Level, st))
		}
		b.WriteString("\n")
	}
	c := pr.Change
	if c.Compared {
		fmt.Fprintf(b, "Change: %s (%s %s interval %s to %s; %s %s; adjusted across the review %s)\n", formatDiff(ch, c.Difference),
			review.LevelPercent(r.Level), c.Interval, formatDiff(ch, c.Lower), formatDiff(ch, c.Upper), c.Test, review.FormatP(c.PValue),
			strings.TrimPrefix(review.FormatP(c.AdjustedP), "p "))
	}
	fmt.Fprintf(b, "Verdict: %s\n", c.VerdictText())

	b.WriteString("\nLots outside their control limits:\n")
	if len(pr.OutOfLimits) == 0 {
		b.WriteString("  none\n")
	}
	for _, o := range pr.OutOfLimits {
		side := "above the upper limit"
		lim := o.UCL
		if !o.Above {
			side, lim = "below the lower limit", o.LCL
		}
		fmt.Fprintf(b, "  %s (%s): %d of %d, %s %s (%s); %s\n", o.Lot.Lot, o.Lot.Time.In(loc).Format("Mon 2006-01-02 15:04"),
			o.Lot.Count, o.Lot.Inspected, side, plotted(ch, lim), o.Limits, review.CauseStatus(o.Annotations))
		writeAnnotations(b, o.Annotations, loc)
	}
	b.WriteString("\nSignals touching the week (run rules and small shifts):\n")
	if len(pr.Signals) == 0 {
		b.WriteString("  none\n")
	}
	for _, s := range pr.Signals {
		what := s.Rule
		if s.Kind == attention.Shift {
			what += " (a sustained small shift)"
		}
		fmt.Fprintf(b, "  %s: %s; lots %s; %s\n", what, s.Description, lotList(s.Lots), review.CauseStatus(s.Annotations))
		if m := s.Meaning(); m != "" {
			fmt.Fprintf(b, "    What it means: %s\n", m)
		}
		writeAnnotations(b, s.Annotations, loc)
	}

	b.WriteString("\nDefect categories (Pareto):\n")
	if len(pr.Pareto) == 0 {
		b.WriteString("  none recorded\n")
	} else {
		fmt.Fprintf(b, "  %-24s %8s %8s %8s\n", "category", "count", "percent", "cum. %")
		for _, bar := range pr.Pareto {
			fmt.Fprintf(b, "  %-24s %8d %7.1f%% %7.1f%%\n", bar.Category, bar.Count, bar.Percent, bar.CumulativePercent)
		}
	}
	if pr.Uncategorized > 0 {
		fmt.Fprintf(b, "  (%d %s not split into categories)\n", pr.Uncategorized, UnitWord(ch))
	}

	fmt.Fprintf(b, "\nTrend (%d weeks):\n", len(pr.Trend))
	for _, st := range pr.Trend {
		if !st.HasLots() {
			fmt.Fprintf(b, "  %s  no lots\n", st.Week)
			continue
		}
		fmt.Fprintf(b, "  %s  %4d lots  %-22s %s to %s\n", st.Week, st.Lots, FormatRate(ch, st.Rate), FormatRate(ch, st.Lower), FormatRate(ch, st.Upper))
	}

	if pr.Dispersion != nil {
		fmt.Fprintf(b, "\nSpread of the week's lots: %s\n", pr.Dispersion.Advice)
	}
	for _, w := range pr.Warnings {
		fmt.Fprintf(b, "Warning: %s\n", w.Message)
	}
	for _, n := range pr.Notes {
		fmt.Fprintf(b, "Note: %s\n", n)
	}
}

// plotted formats a value in the chart's plotted units.
func plotted(ch spc.Chart, v float64) string {
	switch ch {
	case spc.ChartP:
		return review.Percent(v) + "%"
	case spc.ChartU:
		return strconv.FormatFloat(v, 'g', 4, 64) + " per unit"
	}
	return strconv.FormatFloat(v, 'g', 4, 64)
}

func lotList(lots []string) string {
	if len(lots) <= 6 {
		return strings.Join(lots, ", ")
	}
	return strings.Join(lots[:2], ", ") + fmt.Sprintf(" … (%d lots) … ", len(lots)-4) + strings.Join(lots[len(lots)-2:], ", ")
}

func writeAnnotations(b *bufio.Writer, as []store.Annotation, loc *time.Location) {
	for _, a := range as {
		state := "open"
		if a.Closed {
			state = "closed"
			if !a.ClosedAt.IsZero() {
				state += " " + a.ClosedAt.In(loc).Format(dateOnly)
			}
			if a.ClosedBy != "" {
				state += " by " + a.ClosedBy
			}
		}
		if a.NoCauseFound {
			fmt.Fprintf(b, "    no assignable cause found: %s (%s, %s)\n", a.Reason, a.By, state)
			continue
		}
		fmt.Fprintf(b, "    cause: %s", a.Cause)
		if a.Action != "" {
			fmt.Fprintf(b, "; action: %s", a.Action)
		}
		fmt.Fprintf(b, " (%s, %s)\n", a.By, state)
	}
}

// JSON: the field names are a contract read by outside checks.

// NullFloat is a number that encodes NaN and ±Inf as null.
type NullFloat float64

// MarshalJSON encodes the number, or null when it is not finite.
func (f NullFloat) MarshalJSON() ([]byte, error) {
	x := float64(f)
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, x, 'g', -1, 64), nil
}

type jsonReview struct {
	Week       string  `json:"week"`
	From       string  `json:"from"`
	To         string  `json:"to"`
	Method     string  `json:"method"`
	Level      float64 `json:"level"`
	TrendWeeks int     `json:"trend_weeks"`
	Generated  string  `json:"generated"`
	FDR        bool    `json:"fdr"`
	Chance     struct {
		Compared int     `json:"compared"`
		Alpha    float64 `json:"alpha"`
		Expected float64 `json:"expected_by_chance"`
		Stated   int     `json:"stated"`
		AfterFDR int     `json:"stated_after_fdr"`
		Sentence string  `json:"sentence"`
	} `json:"multiplicity"`
	Glance    jsonGlance    `json:"at_a_glance"`
	Processes []jsonProcess `json:"processes"`
	Caution   string        `json:"caution"`
}

// jsonGlance is Glance: counts of processes, and of lots needing attention.
type jsonGlance struct {
	Processes     int    `json:"processes"`
	Rises         int    `json:"rises"`
	Falls         int    `json:"falls"`
	NotCompared   int    `json:"not_compared"`
	Unexplained   int    `json:"unexplained"`
	Shifts        int    `json:"shifts"`
	NeedProcesses int    `json:"needing_attention"`
	NeedLots      int    `json:"lots_needing_attention"`
	Sentence      string `json:"sentence"`
}

type jsonProcess struct {
	Process   string    `json:"process"`
	Area      string    `json:"area,omitempty"`
	Chart     string    `json:"chart"`
	TimeZone  string    `json:"time_zone"`
	Start     string    `json:"start"`
	End       string    `json:"end"`
	Method    string    `json:"method"`
	Lots      int       `json:"lots"`
	Inspected int64     `json:"inspected"`
	Count     int64     `json:"count"`
	Rate      NullFloat `json:"rate"`
	Lower     NullFloat `json:"lower"`
	Upper     NullFloat `json:"upper"`
	Previous  jsonWeek  `json:"previous"`
	Change    struct {
		Difference NullFloat `json:"difference"`
		Lower      NullFloat `json:"lower"`
		Upper      NullFloat `json:"upper"`
		PValue     NullFloat `json:"p_value"`
		AdjustedP  NullFloat `json:"adjusted_p_value"`
		Verdict    string    `json:"verdict"`
		Detail     string    `json:"detail,omitempty"`
		Interval   string    `json:"interval"`
		Test       string    `json:"test"`
	} `json:"change"`
	Signals       []jsonSignal     `json:"signals"`
	OutOfLimits   []jsonOutOfLimit `json:"out_of_limits"`
	Pareto        []jsonPareto     `json:"pareto"`
	Uncategorized int64            `json:"uncategorized"`
	Trend         []jsonWeek       `json:"trend"`
	Dispersion    *jsonDispersion  `json:"dispersion"`
	Warnings      []jsonWarning    `json:"warnings"`
	Notes         []string         `json:"notes"`
	NeedAttention int              `json:"lots_needing_attention"`
}

type jsonWeek struct {
	Week      string    `json:"week"`
	Lots      int       `json:"lots"`
	Inspected int64     `json:"inspected"`
	Count     int64     `json:"count"`
	Rate      NullFloat `json:"rate"`
	Lower     NullFloat `json:"lower"`
	Upper     NullFloat `json:"upper"`
}

type jsonSignal struct {
	Rule string `json:"rule"`
	// Kind is "run_rule" or "shift"; Meaning says what a shift means
	// (absent for a run rule).
	Kind        string                 `json:"kind"`
	Meaning     string                 `json:"meaning,omitempty"`
	Description string                 `json:"description"`
	Side        int8                   `json:"side"`
	Lots        []string               `json:"lots"`
	First       string                 `json:"first"`
	Last        string                 `json:"last"`
	Status      string                 `json:"status"`
	Annotations []storejson.Annotation `json:"annotations"`
}

type jsonOutOfLimit struct {
	Lot         string                 `json:"lot"`
	Time        string                 `json:"time"`
	Inspected   int64                  `json:"inspected"`
	Count       int64                  `json:"count"`
	Value       NullFloat              `json:"value"`
	UCL         NullFloat              `json:"ucl"`
	LCL         NullFloat              `json:"lcl"`
	Side        string                 `json:"side"`
	Limits      string                 `json:"limits"`
	Status      string                 `json:"status"`
	Annotations []storejson.Annotation `json:"annotations"`
}

type jsonPareto struct {
	Category          string  `json:"category"`
	Count             int64   `json:"count"`
	Percent           float64 `json:"percent"`
	CumulativePercent float64 `json:"cumulative_percent"`
}

type jsonDispersion struct {
	ChiSquare     NullFloat `json:"chi_square"`
	DF            int       `json:"df"`
	Ratio         NullFloat `json:"ratio"`
	PValue        NullFloat `json:"p_value"`
	SigmaZ        NullFloat `json:"sigma_z"`
	Overdispersed bool      `json:"overdispersed"`
	Advice        string    `json:"advice"`
}

type jsonWarning struct {
	Code    string `json:"code"`
	Message string `json:"message"`
}

func weekJSON(st review.WeekStat) jsonWeek {
	return jsonWeek{Week: st.Week, Lots: st.Lots, Inspected: st.Inspected, Count: st.Count,
		Rate: NullFloat(st.Rate), Lower: NullFloat(st.Lower), Upper: NullFloat(st.Upper)}
}

func annotationsJSON(as []store.Annotation, lotCode map[int64]string, loc *time.Location) []storejson.Annotation {
	out := make([]storejson.Annotation, 0, len(as))
	for _, a := range as {
		out = append(out, storejson.AnnotationOf(a, lotCode[a.LotID], loc))
	}
	return out
}

func stamp(t time.Time, loc *time.Location) string {
	if t.IsZero() {
		return ""
	}
	return t.In(loc).Format(time.RFC3339)
}

// jsonValue is the review in its JSON form.
func jsonValue(r *review.Review) jsonReview {
	out := jsonReview{Week: r.Week, From: r.FirstDay.Format(dateOnly), To: r.LastDay.Format(dateOnly),
		Method: string(r.Method), Level: r.Level, TrendWeeks: r.TrendWeeks, Generated: r.Generated.UTC().Format(time.RFC3339),
		Processes: make([]jsonProcess, 0, len(r.Processes)), Caution: review.Caution, FDR: r.FDR}
	g := r.Glance()
	out.Glance = jsonGlance{g.Processes, g.Rises, g.Falls, g.NotCompared, g.Unexplained, g.Shifts, g.NeedProcesses, g.NeedLots, g.Sentence()}
	m := r.Chance
	out.Chance.Compared, out.Chance.Alpha, out.Chance.Expected = m.Compared, m.Alpha, m.Expected
	out.Chance.Stated, out.Chance.AfterFDR, out.Chance.Sentence = m.Stated, m.AfterFDR, m.Sentence(r.FDR)
	for _, pr := range r.Processes {
		loc := pr.Process.Location()
		cur := pr.Current
		j := jsonProcess{Process: pr.Process.Name, Area: pr.Process.Area, NeedAttention: pr.NeedAttention, Chart: string(pr.Process.Chart), TimeZone: loc.String(),
			Start: stamp(cur.Start, loc), End: stamp(cur.End, loc), Method: string(pr.Method),
			Lots: cur.Lots, Inspected: cur.Inspected, Count: cur.Count,
			Rate: NullFloat(cur.Rate), Lower: NullFloat(cur.Lower), Upper: NullFloat(cur.Upper),
			Previous: weekJSON(pr.Previous), Uncategorized: pr.Uncategorized,
			Signals: []jsonSignal{}, OutOfLimits: []jsonOutOfLimit{}, Pareto: []jsonPareto{},
			Warnings: []jsonWarning{}, Notes: append([]string{}, pr.Notes...)}
		c := pr.Change
		j.Change.Difference, j.Change.Lower, j.Change.Upper, j.Change.PValue = NullFloat(c.Difference), NullFloat(c.Lower), NullFloat(c.Upper), NullFloat(c.PValue)
		j.Change.AdjustedP = NullFloat(c.AdjustedP)
		j.Change.Verdict, j.Change.Detail, j.Change.Interval, j.Change.Test = c.Verdict, c.Detail, c.Interval, c.Test
		lotCode := map[int64]string{}
		for _, o := range pr.OutOfLimits {
			lotCode[o.Lot.ID] = o.Lot.Lot
		}
		for _, o := range pr.OutOfLimits {
			side := "above"
			if !o.Above {
				side = "below"
			}
			j.OutOfLimits = append(j.OutOfLimits, jsonOutOfLimit{Lot: o.Lot.Lot, Time: stamp(o.Lot.Time, loc),
				Inspected: o.Lot.Inspected, Count: o.Lot.Count, Value: NullFloat(o.Value), UCL: NullFloat(o.UCL), LCL: NullFloat(o.LCL),
				Side: side, Limits: o.Limits, Status: review.CauseStatus(o.Annotations), Annotations: annotationsJSON(o.Annotations, lotCode, loc)})
		}
		for _, s := range pr.Signals {
			j.Signals = append(j.Signals, jsonSignal{Rule: s.Rule, Kind: string(s.Kind), Meaning: s.Meaning(), Description: s.Description, Side: s.Side,
				Lots: append([]string{}, s.Lots...), First: stamp(s.First, loc), Last: stamp(s.Last, loc),
				Status: review.CauseStatus(s.Annotations), Annotations: annotationsJSON(s.Annotations, nil, loc)})
		}
		for _, b := range pr.Pareto {
			j.Pareto = append(j.Pareto, jsonPareto{b.Category, b.Count, b.Percent, b.CumulativePercent})
		}
		for _, st := range pr.Trend {
			j.Trend = append(j.Trend, weekJSON(st))
		}
		if d := pr.Dispersion; d != nil {
			j.Dispersion = &jsonDispersion{NullFloat(d.ChiSquare), d.DF, NullFloat(d.Ratio), NullFloat(d.PValue),
				NullFloat(d.SigmaZ), d.Overdispersed, d.Advice}
		}
		for _, w := range pr.Warnings {
			j.Warnings = append(j.Warnings, jsonWarning{w.Code, w.Message})
		}
		out.Processes = append(out.Processes, j)
	}
	return out
}

// WriteJSON writes the review as JSON. Rates are fractions (defects per
// unit for u and c), null when a week has no lots; "count" is the number
// of nonconforming units for p and np processes and of defects for u and
// c; "from" and "to" are the Monday and the Sunday of the week, and each
// process's "start" and "end" the instants bounding it on the plant's
// clocks ("end" excluded).
func WriteJSON(w io.Writer, r *review.Review) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(jsonValue(r))
}

// CSVHeader is the header row of WriteCSV.
var CSVHeader = []string{"week", "process", "chart", "method", "level", "lots", "inspected", "count", "rate", "lower", "upper",
	"previous_week", "previous_lots", "previous_inspected", "previous_count", "previous_rate", "previous_lower", "previous_upper",
	"difference", "difference_lower", "difference_upper", "p_value", "verdict", "out_of_limits", "signals", "top_category",
	"adjusted_p_value", "lots_needing_attention", "shift_signals"}

// WriteCSV writes one row per process under CSVHeader: rates as
// fractions, empty where a week has no lots. "signals" counts every signal
// touching the week, "shift_signals" those of a sustained small shift
// (CUSUM or EWMA), which call for a cause like any other.
func WriteCSV(w io.Writer, r *review.Review) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(CSVHeader); err != nil {
		return err
	}
	num := func(x float64) string {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return ""
		}
		return strconv.FormatFloat(x, 'g', -1, 64)
	}
	for _, pr := range r.Processes {
		cur, prev, c := pr.Current, pr.Previous, pr.Change
		top := ""
		if len(pr.Pareto) > 0 {
			top = pr.Pareto[0].Category
		}
		// text typed by users is guarded against spreadsheet formulas;
		// numbers (a negative difference starts with "-") are not.
		row := []string{r.Week, lotcsv.Neutralise(pr.Process.Name), string(pr.Process.Chart), string(pr.Method), num(r.Level),
			strconv.Itoa(cur.Lots), strconv.FormatInt(cur.Inspected, 10), strconv.FormatInt(cur.Count, 10), num(cur.Rate), num(cur.Lower), num(cur.Upper),
			prev.Week, strconv.Itoa(prev.Lots), strconv.FormatInt(prev.Inspected, 10), strconv.FormatInt(prev.Count, 10), num(prev.Rate), num(prev.Lower), num(prev.Upper),
			num(c.Difference), num(c.Lower), num(c.Upper), num(c.PValue), c.Verdict,
			strconv.Itoa(len(pr.OutOfLimits)), strconv.Itoa(len(pr.Signals)), lotcsv.Neutralise(top), num(c.AdjustedP), strconv.Itoa(pr.NeedAttention), strconv.Itoa(pr.Shifts())}
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}
