package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestReferenceFresh: docs/block-fields.md is what the generator makes from
// the current .proto comments (regenerate with `go run ./scripts/protodoc`
// from the repository root), and it documents each field of Block.
func TestReferenceFresh(t *testing.T) {
	want, err := Reference()
	if err != nil {
		t.Fatal(err)
	}
	got, err := os.ReadFile(filepath.Join("..", "..", DefaultOut))
	if err != nil {
		t.Fatalf("%v (generate it with `go run ./scripts/protodoc`)", err)
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("%s is stale: run `go run ./scripts/protodoc` from the repository root", DefaultOut)
	}
	for _, f := range []string{"`exposure`", "`frames_wanted`", "`max_airmass`", "`interval`", "DARKNESS_ASTRONOMICAL"} {
		if !strings.Contains(string(want), f) {
			t.Errorf("the reference does not mention %s", f)
		}
	}
}
