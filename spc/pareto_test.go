package spc

import (
	"errors"
	"math"
	"testing"
)

func TestPareto(t *testing.T) {
	// Worked by hand from the definition (count / total, running sum /
	// total; Montgomery, Introduction to Statistical Quality Control, §5.4).
	bars, err := Pareto(map[string]int64{"scratch": 12, "dent": 30, "burr": 12, "stain": 6, "crack": 0})
	if err != nil {
		t.Fatal(err)
	}
	want := []ParetoBar{
		{"dent", 30, 50, 50},
		{"burr", 12, 20, 70}, // tie with scratch: by name
		{"scratch", 12, 20, 90},
		{"stain", 6, 10, 100},
	}
	if len(bars) != len(want) {
		t.Fatalf("got %d bars %v, want %d", len(bars), bars, len(want))
	}
	for i, w := range want {
		b := bars[i]
		if b.Category != w.Category || b.Count != w.Count ||
			math.Abs(b.Percent-w.Percent) > 1e-12 || math.Abs(b.CumulativePercent-w.CumulativePercent) > 1e-12 {
			t.Errorf("bar %d = %+v, want %+v", i, b, w)
		}
	}
}

func TestParetoThirds(t *testing.T) {
	// Three equal counts: 33.33…% each; the cumulative percent must still
	// end at exactly 100 (from the definition).
	bars, err := Pareto(map[string]int64{"c": 1, "a": 1, "b": 1})
	if err != nil {
		t.Fatal(err)
	}
	if bars[0].Category != "a" || bars[1].Category != "b" || bars[2].Category != "c" {
		t.Errorf("order %v, want a, b, c", bars)
	}
	if bars[2].CumulativePercent != 100 {
		t.Errorf("last cumulative percent %v, want 100", bars[2].CumulativePercent)
	}
	if math.Abs(bars[0].Percent-100.0/3) > 1e-12 {
		t.Errorf("percent %v, want 33.33…", bars[0].Percent)
	}
}

func TestParetoEmptyAndBad(t *testing.T) {
	bars, err := Pareto(map[string]int64{"a": 0})
	if err != nil || len(bars) != 0 || bars == nil {
		t.Errorf("all-zero counts: %v, %v; want an empty slice", bars, err)
	}
	_, err = Pareto(map[string]int64{"dent": -2})
	var fe *FieldError
	if !errors.As(err, &fe) || fe.Field != "category dent" || fe.Value != "-2" {
		t.Errorf("negative count: %v; want a FieldError naming the category and value", err)
	}
}
