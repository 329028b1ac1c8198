package main

import (
	"bytes"
	"flag"
	"io/fs"
	"os"
	"path/filepath"
	"testing"
)

var updateDemoData = flag.Bool("update-demodata", false, "copy testdata/demo into cmd/nightloom/demodata")

// The embedded scenario (demodata/) is a copy of testdata/demo, where the
// scenario is documented and kept; the two must not drift apart.
func TestDemoDataMatchesTestdata(t *testing.T) {
	src := os.DirFS(demoDir)
	want := map[string][]byte{}
	fs.WalkDir(src, ".", func(p string, e fs.DirEntry, err error) error {
		if err != nil {
			t.Fatal(err)
		}
		if !e.IsDir() {
			b, err := fs.ReadFile(src, p)
			if err != nil {
				t.Fatal(err)
			}
			want[p] = b
		}
		return nil
	})
	if len(want) == 0 {
		t.Fatalf("no files under %s", demoDir)
	}
	if *updateDemoData {
		if err := os.RemoveAll("demodata"); err != nil {
			t.Fatal(err)
		}
		for p, b := range want {
			dst := filepath.Join("demodata", filepath.FromSlash(p))
			if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(dst, b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	got := map[string][]byte{}
	fs.WalkDir(demoData, "demodata", func(p string, e fs.DirEntry, err error) error {
		if err != nil {
			t.Fatal(err)
		}
		if !e.IsDir() {
			b, _ := fs.ReadFile(demoData, p)
			rel, _ := filepath.Rel("demodata", p)
			got[filepath.ToSlash(rel)] = b
		}
		return nil
	})
	if *updateDemoData {
		return // the embedded copy is the one compiled before the update
	}
	for p, b := range want {
		if g, ok := got[p]; !ok {
			t.Errorf("testdata/demo/%s is not embedded; run go test -run TestDemoData -update-demodata", p)
		} else if !bytes.Equal(g, b) {
			t.Errorf("demodata/%s differs from testdata/demo/%s; run go test -run TestDemoData -update-demodata", p, p)
		}
	}
	for p := range got {
		if _, ok := want[p]; !ok {
			t.Errorf("demodata/%s is not in testdata/demo; run go test -run TestDemoData -update-demodata", p)
		}
	}
}
