package main

// `nightloom target import`: TargetService.ImportElements.

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// maxImportFileBytes matches the server's limit on the text (1 MiB).
const maxImportFileBytes = 1 << 20

func runTargetImport(args []string, stdout, stderr io.Writer) error {
	r := newRemote("target import", stderr)
	path := r.fs.String("elements", "", "file of one-line orbital elements (comet or minor-planet format); required")
	reqID := r.fs.String("request-id", "", "id of this import, so that a retry stores nothing twice (default: derived from the file's contents)")
	skip := r.fs.Bool("skip-bad-lines", false, "import the good lines and list the bad ones instead of refusing the file")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *path == "" {
		return flagError("elements", "required: a file of one-line orbital elements")
	}
	st, err := os.Stat(*path)
	if err != nil {
		return flagError("elements", "%v", err)
	}
	if st.Size() > maxImportFileBytes {
		return flagError("elements", "%s has %d bytes; at most %d per import", *path, st.Size(), maxImportFileBytes)
	}
	data, err := os.ReadFile(*path)
	if err != nil {
		return flagError("elements", "%v", err)
	}
	id := *reqID
	if id == "" {
		// The same file imported twice is the same request: retrying after
		// a lost answer stores nothing twice.
		h := sha256.Sum256(append([]byte(fmt.Sprintf("%t\n", *skip)), data...))
		id = "import-" + hex.EncodeToString(h[:12])
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.targets.ImportElements(ctx, &pb.ImportElementsRequest{RequestId: id, Text: string(data), SkipBadLines: *skip})
	if err != nil {
		return a.callErr("ImportElements", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	if err := printTargets(stdout, resp.GetTargets()); err != nil {
		return err
	}
	for _, b := range resp.GetSkippedLines() {
		fmt.Fprintf(stdout, "skipped line %d, columns %d-%d: %s\n", b.GetLine(), b.GetFirstColumn(), b.GetLastColumn(), b.GetDescription())
	}
	fmt.Fprintf(stdout, "imported %d targets (request %s)\n", len(resp.GetTargets()), id)
	return nil
}
