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
		name:    "compare",
		summary: "compare two rates of nonconforming units (D1 of N1 against D2 of N2)",
		run:     runCompare,
	})
}

const compareHelp = `Usage: lotwatch compare [options] D1 N1 D2 N2

Compares the fraction nonconforming of two groups of lots, for example this
week against last week: the difference, first minus second, with a
confidence interval, and the p-value of the test that both rates are equal.

Arguments:
  D1 N1   nonconforming units found and units inspected in the first group
  D2 N2   the same for the second group
          (whole numbers; each D 0 or more and at most its N; each N above 0)

Options:
  --level L   confidence level, a number between 0 and 1 (default 0.95)
  --format F  text (default) or json
  -h          show this help

The interval is Newcombe's hybrid score interval (1998, method 10), built
from the Wilson intervals of the two rates. The p-value is that of the
two-sided two-proportion z test with the rates pooled when every expected
count of the two-by-two table is at least 5 (Cochran 1954), else that of
Fisher's exact test, since with few expected counts the z test finds
differences that sampling alone produces often. A difference is stated
only when the test and the interval agree.

Exit status: 0 when done, 2 for bad input (nothing is printed on standard
output then; each problem is named on standard error).
`

type compareJSON struct {
	Difference float64 `json:"difference"`
	Lower      float64 `json:"lower"`
	Upper      float64 `json:"upper"`
	PValue     float64 `json:"p_value"`
	Z          float64 `json:"z"`
	Level      float64 `json:"level"`
	Test       string  `json:"test"`
}

func runCompare(args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("compare", flag.ContinueOnError)
	level := fs.String("level", "0.95", "")
	format := fs.String("format", "text", "")
	pos, code := statsParse(fs, args, compareHelp, stdout, stderr)
	if code >= 0 {
		return code
	}
	u := &statsUsage{cmd: "compare"}
	lv := u.level(*level)
	asJSON := u.format(*format)
	var v [4]int64
	if u.arity("D1 N1 D2 N2", 4, pos) {
		for i, name := range []string{"D1", "N1", "D2", "N2"} {
			v[i] = u.count(name, pos[i], int64(i%2))
		}
		for i := 0; i < 4; i += 2 {
			if v[i] > v[i+1] && v[i+1] >= 1 {
				u.addf("D%d %q is more than N%d %q: nonconforming units cannot exceed the units inspected", i/2+1, pos[i], i/2+1, pos[i+1])
			}
		}
	}
	if c := u.report(stderr); c >= 0 {
		return c
	}
	diff, err := spc.CompareProportions(v[0], v[1], v[2], v[3], lv)
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch compare: %v\n", err)
		return exitUsage
	}
	if asJSON {
		return statsJSON(stdout, compareJSON{diff.Difference, diff.Lower, diff.Upper, diff.PValue, diff.Z, diff.Level, diff.Test})
	}
	p1, p2 := float64(v[0])/float64(v[1]), float64(v[2])/float64(v[3])
	fmt.Fprintf(stdout, "First:  %d nonconforming of %d inspected, fraction %s\n", v[0], v[1], statsRate(p1))
	fmt.Fprintf(stdout, "Second: %d nonconforming of %d inspected, fraction %s\n", v[2], v[3], statsRate(p2))
	fmt.Fprintf(stdout, "Difference, first minus second: %s\n", statsRate(diff.Difference))
	fmt.Fprintf(stdout, "%s interval for the difference (Newcombe hybrid score): %s to %s\n", statsPercent(lv), statsRate(diff.Lower), statsRate(diff.Upper))
	fmt.Fprintf(stdout, "Test of equal rates (%s): z = %s, p-value = %s\n", diff.Test,
		strconv.FormatFloat(diff.Z, 'f', 2, 64), strconv.FormatFloat(diff.PValue, 'g', 3, 64))
	excludes0 := diff.Lower > 0 || diff.Upper < 0
	switch {
	case excludes0 && diff.PValue < 1-lv:
		fmt.Fprintf(stdout, "\nThe interval does not include 0 and the test agrees: at %s confidence the two rates differ.\n", statsPercent(lv))
	case excludes0 || diff.PValue < 1-lv:
		fmt.Fprintf(stdout, "\nThe interval and the test disagree (the interval %s 0, p-value %s): too close to call; these counts do not show that the two rates differ.\n",
			map[bool]string{true: "leaves out", false: "includes"}[excludes0], strconv.FormatFloat(diff.PValue, 'g', 3, 64))
	default:
		fmt.Fprintf(stdout, "\nThe interval includes 0: these counts do not show that the two rates differ.\n")
	}
	fmt.Fprint(stdout, "\n"+caution)
	return exitOK
}
