package main

import (
	"bytes"
	"testing"
	"time"
)

// The demo data set is invented; these checks only hold the generator to
// the scenario it promises (determinism, a drift, a spike, varying n).

func TestDemoPlantIsDeterministic(t *testing.T) {
	end := time.Date(2026, 11, 30, 18, 0, 0, 0, time.UTC)
	a, b := demoPlant(end, demoSeed), demoPlant(end, demoSeed)
	for i := range a {
		if !bytes.Equal(demoCSV(a[i]), demoCSV(b[i])) {
			t.Fatalf("process %s differs between two runs with the same seed", a[i].Name)
		}
	}
	c := demoPlant(end, demoSeed+1)
	if bytes.Equal(demoCSV(a[0]), demoCSV(c[0])) {
		t.Fatal("another seed gave the same lots")
	}
}

func TestDemoPlantScenario(t *testing.T) {
	end := time.Date(2026, 11, 30, 18, 0, 0, 0, time.UTC)
	plant := demoPlant(end, demoSeed)
	if len(plant) < 3 {
		t.Fatalf("want several processes, got %d", len(plant))
	}
	for _, p := range plant {
		if len(p.Lots) < 150 {
			t.Errorf("%s: only %d lots", p.Name, len(p.Lots))
		}
		seen := map[string]bool{}
		for i, l := range p.Lots {
			if seen[l.Code] {
				t.Errorf("%s: lot code %s twice", p.Name, l.Code)
			}
			seen[l.Code] = true
			if i > 0 && l.Time.Before(p.Lots[i-1].Time) {
				t.Errorf("%s: lot %s out of time order", p.Name, l.Code)
			}
			if l.Time.After(end) {
				t.Errorf("%s: lot %s after the end", p.Name, l.Code)
			}
			var sum int64
			for _, c := range l.Categories {
				sum += c
			}
			if sum != l.Count {
				t.Errorf("%s: lot %s categories add to %d, count %d", p.Name, l.Code, sum, l.Count)
			}
		}
	}
	// the harness drift: the last three weeks run at a clearly higher rate
	rate := func(lots []demoLot) float64 {
		var d, n int64
		for _, l := range lots {
			d += l.Count
			n += l.Inspected
		}
		return float64(d) / float64(n)
	}
	h := plant[1].Lots
	cut := end.AddDate(0, 0, -14)
	var before, after []demoLot
	for _, l := range h {
		if l.Time.Before(cut) {
			before = append(before, l)
		} else {
			after = append(after, l)
		}
	}
	if rate(after) < 1.5*rate(before) {
		t.Errorf("harness drift too small: %.4f before, %.4f after", rate(before), rate(after))
	}
	if len(plant[0].Causes) != 1 {
		t.Errorf("want one recorded cause on the housing line, got %d", len(plant[0].Causes))
	}
}
