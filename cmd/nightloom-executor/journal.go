package main

// The run journal: one small JSON file per run, written before each step
// that matters, so that a restarted executor knows which frames it kept and
// which runs it has not reported yet.

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"
)

// runRecord is one run: a part of an assignment carried out in one go.
type runRecord struct {
	RunID    string `json:"run_id"`
	ReportID string `json:"report_id"`
	PlanID   string `json:"plan_id"`
	BlockID  string `json:"block_id"`
	Target   string `json:"target"`
	Filter   string `json:"filter"`
	// AssignmentStart identifies the assignment with the plan and block.
	AssignmentStart time.Time `json:"assignment_start"`
	// FirstFrame is the number of frames of the assignment kept by earlier
	// runs (after a restart): this run's frames are numbered from it + 1.
	FirstFrame int `json:"first_frame"`
	FramesWant int `json:"frames_wanted"`

	PlannedStart time.Time `json:"planned_start"`
	PlannedEnd   time.Time `json:"planned_end"`
	PrepareStart time.Time `json:"prepare_start"`
	Start        time.Time `json:"start,omitzero"` // first exposure began
	End          time.Time `json:"end,omitzero"`   // last kept frame ended
	Dir          string    `json:"dir"`            // folder of the night's files
	Files        []string  `json:"files"`          // kept frames, in Dir

	SlewModelS  float64 `json:"slew_model_s"`
	SlewActualS float64 `json:"slew_actual_s"`
	SlewDegrees float64 `json:"slew_deg"`
	// SlewAxisDeg is the larger axis move of the slew (what the overhead
	// model's trapezoidal profile is fitted on).
	SlewAxisDeg float64 `json:"slew_axis_deg"`
	// PointingOffArcsec is how far the mount stood from the place it was
	// sent to, after the slew.
	PointingOffArcsec float64 `json:"pointing_off_arcsec"`

	Outcome  string `json:"outcome,omitempty"` // done, interrupted, failed, skipped; empty while running
	Note     string `json:"note,omitempty"`
	Reported bool   `json:"reported"`
}

// runIDFor derives the run's id from the assignment (plan, block, start)
// and the frames of it already kept, so that the same run gets the same id
// after a crash and a retried report is counted once.
func runIDFor(planID, blockID string, start time.Time, firstFrame int) string {
	h := sha256.Sum256([]byte(fmt.Sprintf("%s|%s|%s|%d", planID, blockID, start.UTC().Format(time.RFC3339Nano), firstFrame)))
	return hex.EncodeToString(h[:10])
}

type journal struct{ dir string }

func openJournal(dir string) (*journal, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	return &journal{dir: dir}, nil
}

// save writes a record atomically (temporary file, fsync, rename).
func (j *journal) save(r *runRecord) error {
	b, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return err
	}
	return writeFileAtomic(filepath.Join(j.dir, r.RunID+".json"), b)
}

// all returns every record, oldest planned start first.
func (j *journal) all() ([]*runRecord, error) {
	names, err := filepath.Glob(filepath.Join(j.dir, "*.json"))
	if err != nil {
		return nil, err
	}
	var out []*runRecord
	for _, n := range names {
		b, err := os.ReadFile(n)
		if err != nil {
			return nil, err
		}
		var r runRecord
		if err := json.Unmarshal(b, &r); err != nil {
			return nil, fmt.Errorf("journal %s: %w", n, err)
		}
		out = append(out, &r)
	}
	sort.Slice(out, func(i, k int) bool { return out[i].PrepareStart.Before(out[k].PrepareStart) })
	return out, nil
}

// framesKept returns how many frames earlier runs kept of one assignment:
// runs of the same plan and block whose assignment interval overlaps
// [start, end] by more than half of the shorter one. (Dispatch may move an
// assignment's start by the overheads it recomputes, and returns a run in
// progress as planned, so the start alone does not name an assignment.)
func (j *journal) framesKept(planID, blockID string, start, end time.Time) (int, error) {
	all, err := j.all()
	if err != nil {
		return 0, err
	}
	n := 0
	for _, r := range all {
		if r.PlanID == planID && r.BlockID == blockID && sameAssignment(r.AssignmentStart, r.PlannedEnd, start, end) {
			n += len(r.Files)
		}
	}
	return n, nil
}

// sameAssignment reports whether two intervals overlap by more than half of
// the shorter one.
func sameAssignment(s1, e1, s2, e2 time.Time) bool {
	lo, hi := maxTime(s1, s2), e1
	if e2.Before(hi) {
		hi = e2
	}
	shorter := min(e1.Sub(s1), e2.Sub(s2))
	return hi.Sub(lo) > shorter/2
}

func writeFileAtomic(path string, b []byte) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return err
	}
	defer os.Remove(tmp.Name())
	if _, err := tmp.Write(b); err != nil {
		tmp.Close()
		return err
	}
	if err := tmp.Sync(); err != nil {
		tmp.Close()
		return err
	}
	if err := tmp.Close(); err != nil {
		return err
	}
	return os.Rename(tmp.Name(), path)
}

// frameName is a frame's file name: block, run, frame number in the
// assignment.
func frameName(r *runRecord, n int) string {
	safe := strings.Map(func(c rune) rune {
		if c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '-' || c == '_' {
			return c
		}
		return '_'
	}, r.BlockID)
	return fmt.Sprintf("%s_%s_%03d.fits", safe, r.RunID, n)
}
