// Command export writes the medium benchmark instances of testdata/scheduler
// as mixed-integer linear programs (scheduler.ReferenceMILP, a relaxation
// of the model) into testdata/milp, gzipped JSON, and prints each export's
// SHA-256. testdata/milp/solve.py solves them. Run from the repository
// root:
//
//	go run ./testdata/milp/export
package main

import (
	"compress/gzip"
	"flag"
	"fmt"
	"os"
	"path/filepath"

	"github.com/nightloom/nightloom/scheduler"
)

// Instances is the list of exported instances (testdata/scheduler names).
var instances = []string{"medium", "medium150"}

func main() {
	src := flag.String("instances", "testdata/scheduler", "directory of the benchmark instances")
	dir := flag.String("dir", "testdata/milp", "output directory")
	flag.Parse()
	for _, name := range instances {
		if err := export(*src, *dir, name); err != nil {
			fmt.Fprintln(os.Stderr, name, err)
			os.Exit(1)
		}
	}
}

func export(src, dir, name string) error {
	f, err := os.Open(filepath.Join(src, name+".json"))
	if err != nil {
		return err
	}
	defer f.Close()
	in, err := scheduler.ReadInstance(f)
	if err != nil {
		return err
	}
	p, err := in.Problem(scheduler.Options{Seed: 1})
	if err != nil {
		return err
	}
	m, err := p.ReferenceMILP(name)
	if err != nil {
		return err
	}
	out, err := os.Create(filepath.Join(dir, name+".json.gz"))
	if err != nil {
		return err
	}
	zw := gzip.NewWriter(out)
	sum, err := m.WriteJSON(zw)
	if err != nil {
		return err
	}
	if err := zw.Close(); err != nil {
		return err
	}
	if err := out.Close(); err != nil {
		return err
	}
	fmt.Printf("%s: %d variables, %d rows, sha256 %s\n", name, m.Vars, len(m.RowLo), sum)
	return nil
}
