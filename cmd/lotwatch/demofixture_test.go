package main

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var updateFixtures = flag.Bool("update", false, "rewrite the demo CSV files in testdata/demo from the generator")

// TestDemoCSVFixtures keeps testdata/demo (used by the README's worked
// example) equal to what the seeded generator writes.
// Regenerate with: go test ./cmd/lotwatch -run DemoCSVFixtures -update
func TestDemoCSVFixtures(t *testing.T) {
	dir := filepath.Join("..", "..", "testdata", "demo")
	for _, dp := range demoPlant(demoEnd, demoSeed) {
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
