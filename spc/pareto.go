package spc

import (
	"fmt"
	"sort"
)

// ParetoBar is one defect category of a Pareto analysis: its Count, its
// Percent of all counts and the CumulativePercent of it and every bar
// before it.
type ParetoBar struct {
	Category          string
	Count             int64
	Percent           float64
	CumulativePercent float64
}

// Pareto orders defect categories by count, largest first, ties by
// category name, and gives each its share of the total and the running
// share (Juran's Pareto analysis; e.g. Montgomery, Introduction to
// Statistical Quality Control, §5.4). Categories with a count of 0 are
// left out; a negative count is an error naming the category. With no
// counts at all it returns an empty slice. The last cumulative percent is
// exactly 100.
func Pareto(counts map[string]int64) ([]ParetoBar, error) {
	bars := make([]ParetoBar, 0, len(counts))
	var total int64
	for cat, n := range counts {
		switch {
		case n < 0:
			return nil, &FieldError{Field: "category " + cat, Value: fmt.Sprint(n), Reason: "must not be negative"}
		case n == 0:
			continue
		}
		bars = append(bars, ParetoBar{Category: cat, Count: n})
		total += n
	}
	sort.Slice(bars, func(i, j int) bool {
		if bars[i].Count != bars[j].Count {
			return bars[i].Count > bars[j].Count
		}
		return bars[i].Category < bars[j].Category
	})
	var run int64
	for i := range bars {
		run += bars[i].Count
		bars[i].Percent = 100 * float64(bars[i].Count) / float64(total)
		// From the running count, not a sum of rounded percents, so that
		// the last bar is 100 exactly.
		bars[i].CumulativePercent = 100 * float64(run) / float64(total)
	}
	return bars, nil
}
