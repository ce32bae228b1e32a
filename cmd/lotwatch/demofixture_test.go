package main

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"testing"
	"time"
)

var updateFixtures = flag.Bool("update", false, "rewrite the demo CSV files in testdata/demo from the generator")

// demoFixtureEnd anchors the committed demo CSV files in time; the live
// demo anchors the same seeded values at the day it is built.
var demoFixtureEnd = time.Date(2026, 11, 27, 18, 0, 0, 0, time.UTC)

// TestDemoCSVFixtures keeps testdata/demo (used by the README's worked
// example) equal to what the seeded generator writes.
// Regenerate with: go test ./cmd/lotwatch -run DemoCSVFixtures -update
func TestDemoCSVFixtures(t *testing.T) {
	dir := filepath.Join("..", "..", "testdata", "demo")
	for _, dp := range demoPlant(demoFixtureEnd, demoSeed) {
		name := filepath.Join(dir, demoFileName(dp.Name))
		want := demoCSV(dp)
		if *updateFixtures {
			if err := os.MkdirAll(dir, 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(name, want, 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		got, err := os.ReadFile(name)
		if err != nil {
			t.Fatalf("%v (regenerate with -update)", err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("%s differs from the generator (regenerate with -update)", name)
		}
	}
}
