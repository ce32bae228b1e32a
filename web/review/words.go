package review

import (
	"math"
	"strconv"
)

// The plain words the review's figures are stated in, shared by the
// verdicts here and the renderings in package report.

// Percent writes 100·x with two decimals, or three significant digits
// when two decimals would hide it.
func Percent(x float64) string {
	y := 100 * x
	if y != 0 && math.Abs(y) < 0.01 {
		return strconv.FormatFloat(y, 'g', 3, 64)
	}
	return strconv.FormatFloat(y, 'f', 2, 64)
}

// LevelPercent writes a confidence level (or a significance) as a
// percent: 0.95 → "95%".
func LevelPercent(level float64) string {
	return strconv.FormatFloat(level*100, 'g', 6, 64) + "%"
}

// Plural writes a count with its noun: "1 lot", "3 lots".
func Plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return strconv.Itoa(n) + " " + many
}

// VerdictText is the verdict with the too-little-data reason, as written
// in the text and HTML renderings.
func (c Change) VerdictText() string {
	if c.Detail != "" {
		return c.Detail
	}
	return c.Verdict
}

// UnexplainedOut counts the week's lots outside their limits with no
// cause recorded.
func (pr *ProcessReview) UnexplainedOut() int {
	n := 0
	for _, o := range pr.OutOfLimits {
		if len(o.Annotations) == 0 {
			n++
		}
	}
	return n
}

// UnexplainedSignals counts the signals touching the week with no cause
// recorded.
func (pr *ProcessReview) UnexplainedSignals() int {
	n := 0
	for _, s := range pr.Signals {
		if len(s.Annotations) == 0 {
			n++
		}
	}
	return n
}
