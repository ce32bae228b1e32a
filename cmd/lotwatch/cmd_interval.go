package main

import (
	"flag"
	"fmt"
	"io"
	"strconv"

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
                   jeffreys         interval from the Jeffreys prior, equal-tailed
                                    except at D = 0 (lower end 0) and D = N
                                    (upper end 1)
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
