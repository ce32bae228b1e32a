package main

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"lotwatch/spc"
)

func init() {
	register(command{
		name:    "interval",
		summary: "confidence interval for a rate of nonconforming units (D of N)",
		run:     runInterval,
	})
}

const intervalHelp = `Usage: lotwatch interval [options] D N

Estimates the fraction nonconforming D/N of the units inspected and gives
a confidence interval: the range of rates that fit what was found.

Arguments:
  D   nonconforming units found: a whole number, 0 or more, at most N
      (with --method poisson-exact: defects found, which may exceed N)
  N   units inspected: a whole number greater than 0

Options:
  --method NAME  how the interval is computed (default wilson):
                   wilson           Wilson score interval; close to the stated
                                    confidence at any N (the default)
                   clopper-pearson  exact binomial interval; never covers less
                                    often than stated, usually more, so it is wider
                   agresti-coull    simple adjusted interval, close to Wilson
                   jeffreys         equal-tailed interval from the Jeffreys prior
                   wald             the textbook normal approximation; covers far
                                    less often than stated for small N or rates
                                    near 0 or 1
                   poisson-exact    exact interval for defects per unit (D defects
                                    on N units)
  --level L      confidence level, a number between 0 and 1 (default 0.95)
  --format F     text (default) or json
  -h             show this help

Exit status: 0 when done, 2 for bad input (nothing is printed on standard
output then; each problem is named on standard error).
`

// statsUsage collects the usage problems of one command invocation, one
// line each, so that all of them are reported at once.
type statsUsage struct {
	cmd      string
	problems []string
}

func (u *statsUsage) addf(format string, a ...any) {
	u.problems = append(u.problems, fmt.Sprintf(format, a...))
}

// report prints the problems to stderr and returns exitUsage, or returns -1
// when there are none.
func (u *statsUsage) report(stderr io.Writer) int {
	if len(u.problems) == 0 {
		return -1
	}
	for _, p := range u.problems {
		fmt.Fprintf(stderr, "lotwatch %s: %s\n", u.cmd, p)
	}
	return exitUsage
}

// statsParse parses the leading options of args with fs and returns the
// positional arguments. Every option of these commands takes a value, so
// the options end at "--", at the first word not starting with "-", or at
// a negative number (which is a bad argument, not an option). It returns
// a status ≥ 0 when the command is done: exitOK after printing help,
// exitUsage after naming a bad option.
func statsParse(fs *flag.FlagSet, args []string, help string, stdout, stderr io.Writer) ([]string, int) {
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	i := 0
	for i < len(args) {
		a := args[i]
		if a == "--" {
			i++
			break
		}
		if !strings.HasPrefix(a, "-") || a == "-" {
			break
		}
		if _, err := strconv.ParseFloat(a, 64); err == nil {
			break
		}
		name := strings.TrimLeft(a, "-")
		if strings.Contains(name, "=") || name == "h" || name == "help" {
			i++
		} else {
			i += 2
		}
	}
	i = min(i, len(args))
	if err := fs.Parse(args[:i]); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			fmt.Fprint(stdout, help)
			return nil, exitOK
		}
		msg := err.Error()
		if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
			for _, a := range args[:i] {
				if before, _, _ := strings.Cut(a, "="); strings.TrimLeft(before, "-") == strings.TrimLeft(name, "-") {
					name = before
					break
				}
			}
			msg = fmt.Sprintf("unknown option %s; run `lotwatch %s -h` for the options", name, fs.Name())
		}
		fmt.Fprintf(stderr, "lotwatch %s: %s\n", fs.Name(), msg)
		return nil, exitUsage
	}
	return append(fs.Args(), args[i:]...), -1
}

// arity reports a wrong number of positional arguments, with a hint when
// an option came after them.
func (u *statsUsage) arity(want string, wantN int, pos []string) bool {
	if len(pos) == wantN {
		return true
	}
	hint := ""
	for _, a := range pos {
		if _, err := strconv.ParseFloat(a, 64); strings.HasPrefix(a, "-") && err != nil {
			hint = "; options go before the arguments"
			break
		}
	}
	u.addf("want %d arguments, %s, got %d (%s)%s", wantN, want, len(pos), strings.Join(pos, " "), hint)
	return false
}

// count parses a whole-number argument that must be at least lowest.
func (u *statsUsage) count(name, s string, lowest int64) int64 {
	v, err := strconv.ParseInt(s, 10, 64)
	switch {
	case err != nil:
		u.addf("%s %q is not a whole number", name, s)
	case v < lowest && lowest == 0:
		u.addf("%s %q must not be negative", name, s)
	case v < lowest:
		u.addf("%s %q must be %d or more", name, s, lowest)
	}
	return v
}

// level parses a confidence level in (0, 1).
func (u *statsUsage) level(s string) float64 {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || !(v > 0 && v < 1) {
		u.addf("--level %q must be a number between 0 and 1, such as 0.95", s)
	}
	return v
}

// format checks the --format value.
func (u *statsUsage) format(s string) bool {
	switch s {
	case "text":
		return false
	case "json":
		return true
	}
	u.addf("--format %q must be text or json", s)
	return false
}

// statsRate formats a rate for reading: four decimals, or three significant
// digits in exponent form for rates under 0.001 that four decimals would hide.
func statsRate(x float64) string {
	if x == 0 || math.Abs(x) >= 0.001 {
		return strconv.FormatFloat(x, 'f', 4, 64)
	}
	return strconv.FormatFloat(x, 'e', 2, 64)
}

// statsPercent formats a confidence level as a percentage, e.g. "95%".
func statsPercent(level float64) string {
	return strconv.FormatFloat(level*100, 'g', 6, 64) + "%"
}

// statsJSON writes v as indented JSON.
func statsJSON(w io.Writer, v any) int {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		return exitFail
	}
	return exitOK
}

type intervalJSON struct {
	Method   spc.IntervalMethod `json:"method"`
	Level    float64            `json:"level"`
	Estimate float64            `json:"estimate"`
	Lower    float64            `json:"lower"`
	Upper    float64            `json:"upper"`
	Caveat   string             `json:"caveat,omitempty"`
}

func runInterval(args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("interval", flag.ContinueOnError)
	method := fs.String("method", string(spc.IntervalWilson), "")
	level := fs.String("level", "0.95", "")
	format := fs.String("format", "text", "")
	pos, code := statsParse(fs, args, intervalHelp, stdout, stderr)
	if code >= 0 {
		return code
	}
	u := &statsUsage{cmd: "interval"}
	m, err := spc.ParseIntervalMethod(*method)
	if err != nil {
		u.addf("--method %q is not known (want wilson, clopper-pearson, agresti-coull, jeffreys, wald or poisson-exact)", *method)
	}
	lv := u.level(*level)
	asJSON := u.format(*format)
	var d, n int64
	if u.arity("D and N", 2, pos) {
		d = u.count("D", pos[0], 0)
		n = u.count("N", pos[1], 1)
		if d >= 0 && n >= 1 && d > n && m != spc.IntervalPoissonExact {
			u.addf("D %q is more than N %q: nonconforming units cannot exceed the units inspected", pos[0], pos[1])
		}
	}
	if c := u.report(stderr); c >= 0 {
		return c
	}

	var iv spc.Interval
	if m == spc.IntervalPoissonExact {
		iv, err = spc.PoissonInterval(d, float64(n), lv)
	} else {
		iv, err = spc.ProportionInterval(d, n, lv, m)
	}
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch interval: %v\n", err)
		return exitUsage
	}
	if asJSON {
		return statsJSON(stdout, intervalJSON{Method: iv.Method, Level: iv.Level, Estimate: iv.Estimate, Lower: iv.Lower, Upper: iv.Upper, Caveat: m.Caveat()})
	}
	if m == spc.IntervalPoissonExact {
		fmt.Fprintf(stdout, "%d defects on %d units inspected: %s defects per unit\n", d, n, statsRate(iv.Estimate))
	} else {
		fmt.Fprintf(stdout, "%d nonconforming of %d inspected: fraction %s (%s%%)\n", d, n, statsRate(iv.Estimate), strconv.FormatFloat(100*iv.Estimate, 'f', 2, 64))
	}
	fmt.Fprintf(stdout, "%s %s interval: %s to %s\n", statsPercent(lv), m, statsRate(iv.Lower), statsRate(iv.Upper))
	if c := m.Caveat(); c != "" {
		fmt.Fprintf(stdout, "\nWarning: %s\n", c)
	}
	fmt.Fprint(stdout, "\n"+caution)
	return exitOK
}
