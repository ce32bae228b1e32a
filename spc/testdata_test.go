package spc

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
)

// readTestdata decodes the JSON file name of testdata (reference values,
// each written by the script beside it) into v.
func readTestdata(t *testing.T, name string, v any) {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join("testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(raw, v); err != nil {
		t.Fatalf("%s: %v", name, err)
	}
}
