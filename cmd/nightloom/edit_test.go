package main

import (
	"encoding/csv"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestEditAndExportCommands: `block update` by flags, `block withdraw
// --site --target` in one call, `plan export` as CSV read back with
// encoding/csv (local and UTC times equal to the plan's).
func TestEditAndExportCommands(t *testing.T) {
	d := startTestDaemon(t)
	site, targets, blocks := loadScenario(t, d)
	var ur pb.UpdateBlockResponse
	parse(t, d.cli(t, "block", "update", "--block", blocks[0].GetId(), "--priority", "9", "--frames", "40", "--exposure", "240s",
		"--latest", "2027-02-01", "--json").ok(t, "block update").stdout, &ur)
	if b := ur.GetBlock(); b.GetPriority() != 9 || b.GetFramesWanted() != 40 || b.GetExposure().AsDuration() != 4*time.Minute ||
		dateString(b.GetLatestDate()) != "2027-02-01" || b.GetFilter() != blocks[0].GetFilter() {
		t.Errorf("updated block: %v", b)
	}
	if r := d.cli(t, "block", "update", "--block", blocks[0].GetId()); r.code != 2 || !strings.Contains(r.stderr, "nothing to change") {
		t.Errorf("update without a field: exit %d %s", r.code, r.stderr)
	}
	if r := d.cli(t, "block", "update", "--block", blocks[0].GetId(), "--priority", "12"); r.code != 1 || !strings.Contains(r.stderr, "block.priority") {
		t.Errorf("priority 12: exit %d %s", r.code, r.stderr)
	}

	var tgt string
	want := 0
	for _, tg := range targets {
		if tg.GetName() == "NLD 27" {
			tgt = tg.GetId()
		}
	}
	for _, b := range blocks {
		if b.GetTargetId() == tgt {
			want++
		}
	}
	var wr pb.WithdrawBlocksResponse
	parse(t, d.cli(t, "block", "withdraw", "--site", site.GetId(), "--target", tgt, "--reason", "clouds all week", "--json").ok(t, "bulk withdraw").stdout, &wr)
	if len(wr.GetBlocks()) != want || want == 0 {
		t.Errorf("bulk withdraw: %d blocks, want %d", len(wr.GetBlocks()), want)
	}

	var mk pb.MakePlanResponse
	parse(t, d.cli(t, "plan", "make", "--site", site.GetId(), "--night", "2027-01-14", "--budget", "200ms", "--seed", "3", "--json").ok(t, "plan make").stdout, &mk)
	plan := mk.GetPlans()[0]
	out := filepath.Join(t.TempDir(), "night.csv")
	d.cli(t, "plan", "export", "--plan", plan.GetId(), "--out", out).ok(t, "plan export")
	f, err := os.Open(out)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil || len(rows) != len(plan.GetAssignments())+1 {
		t.Fatalf("CSV: %d rows, %v; want %d runs", len(rows)-1, err, len(plan.GetAssignments()))
	}
	paris, _ := time.LoadLocation("Europe/Paris")
	for i, a := range plan.GetAssignments() {
		if got, want := rows[i+1][6], a.GetStart().AsTime().In(paris).Truncate(time.Second).Format(time.RFC3339); got != want {
			t.Errorf("run %d local start %s, want %s", i+1, got, want)
		}
		if got, want := rows[i+1][8], a.GetStart().AsTime().UTC().Truncate(time.Second).Format(time.RFC3339); got != want {
			t.Errorf("run %d UTC start %s, want %s", i+1, got, want)
		}
	}
	r := d.cli(t, "plan", "export", "--plan", plan.GetId(), "--format", "ics").ok(t, "plan export ics")
	if !strings.HasPrefix(r.stdout, "BEGIN:VCALENDAR\r\n") || strings.Count(r.stdout, "BEGIN:VEVENT") != len(plan.GetAssignments()) {
		t.Errorf("ics export: %d events, want %d", strings.Count(r.stdout, "BEGIN:VEVENT"), len(plan.GetAssignments()))
	}
	if r := d.cli(t, "plan", "export", "--plan", plan.GetId(), "--format", "xls"); r.code != 2 || !strings.Contains(r.stderr, "flag --format") {
		t.Errorf("bad format: exit %d %s", r.code, r.stderr)
	}
}
