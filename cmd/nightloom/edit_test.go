package main

import (
	"encoding/csv"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

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
	w := d.cli(t, "plan", "watch", "--site", site.GetId(), "--current", "--count", "1").ok(t, "plan watch --current").stdout
	if !strings.Contains(w, "latest plan when the watch began: the night of 2027-01-14") {
		t.Errorf("plan watch --current does not say which night:\n%s", w)
	}
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

// TestNightAndEventsOnePresentation: `night` (offline) and `events`
// (daemon) print the same table: the same event names in words, in time
// order, local time first, then the Moon's phase and illumination.
func TestNightAndEventsOnePresentation(t *testing.T) {
	d := startTestDaemon(t)
	site, _, _ := loadScenario(t, d)
	ev := d.cli(t, "events", "--site", site.GetId(), "--date", "2027-01-14").ok(t, "events").stdout
	ni := d.cli(t, "night", "--site", "44.12,5.24,650", "--date", "2027-01-14", "--tz", "Europe/Paris").ok(t, "night").stdout
	table := func(out string) (names []string, moon string) {
		lines := strings.Split(out, "\n")
		in := false
		var last time.Time
		for _, l := range lines {
			switch {
			case strings.HasPrefix(l, "event "):
				in = true
				if !strings.Contains(l, "local (Europe/Paris)  UTC") && !strings.Contains(l, "local (Europe/Paris)") {
					t.Errorf("header %q: want local first", l)
				}
			case strings.HasPrefix(l, "Moon at local midnight"):
				moon = l
				in = false
			case in && strings.TrimSpace(l) != "":
				f := strings.Fields(l)
				i := 0
				for i < len(f) && !strings.HasPrefix(f[i], "20") {
					i++
				}
				names = append(names, strings.Join(f[:i], " "))
				if i+1 < len(f) {
					ts, err := time.Parse("2006-01-02 15:04:05", f[i]+" "+f[i+1])
					if err == nil && ts.Before(last) {
						t.Errorf("events out of time order at %q", l)
					}
					last = ts
				}
			}
		}
		return names, moon
	}
	en, em := table(ev)
	nn, nm := table(ni)
	if strings.Join(en, ",") != strings.Join(nn, ",") || len(en) != 10 {
		t.Errorf("event names differ:\nevents %v\nnight  %v", en, nn)
	}
	if em == "" || em != nm || !strings.Contains(em, "waxing crescent, 41 % illuminated") {
		t.Errorf("Moon lines: events %q, night %q; want the same, waxing crescent 41 %%", em, nm)
	}
}

// TestMoonPhaseWords: the phase names at their limits (common practice,
// no source: new and full within 3 %, quarters within 3 % of half).
func TestMoonPhaseWords(t *testing.T) {
	for _, c := range []struct {
		f      float64
		waxing bool
		want   string
	}{{0.01, true, "new Moon"}, {0.2, true, "waxing crescent"}, {0.5, true, "first quarter"}, {0.8, true, "waxing gibbous"},
		{0.99, false, "full Moon"}, {0.8, false, "waning gibbous"}, {0.5, false, "last quarter"}, {0.2, false, "waning crescent"}} {
		if got := moonPhase(c.f, c.waxing); got != c.want {
			t.Errorf("moonPhase(%v, %v) = %q, want %q", c.f, c.waxing, got, c.want)
		}
	}
}

// TestBrightMoonNote: a run 20 deg from a nearly full Moon that is up, for
// a block without a Moon limit, gets the note; with a limit, farther away,
// or under the 41 % Moon of the demo night, it does not. (The Moon's
// fraction comes from ephem, checked against Meeus ch. 48 in its tests.)
func TestBrightMoonNote(t *testing.T) {
	site := &pb.Site{LatitudeDeg: 44.12, LongitudeDeg: 5.24, ElevationM: 650}
	run := func(at string, sep float64) *pb.Assignment {
		ts, _ := time.Parse(time.RFC3339, at)
		c := &pb.PredictedConditions{MoonSeparationDeg: sep}
		return &pb.Assignment{Start: timestamppb.New(ts), ConditionsAtStart: c, ConditionsAtEnd: c}
	}
	free := &pb.Block{}
	guarded := &pb.Block{Constraints: &pb.ConstraintSet{MinMoonSeparationDeg: proto.Float64(15)}}
	for _, c := range []struct {
		name string
		b    *pb.Block
		a    *pb.Assignment
		note bool
	}{
		{"near a full Moon, no limit", free, run("2027-01-21T22:00:00Z", 20), true},
		{"near a full Moon, with a limit", guarded, run("2027-01-21T22:00:00Z", 20), false},
		{"far from a full Moon", free, run("2027-01-21T22:00:00Z", 60), false},
		{"near the 41 % Moon", free, run("2027-01-14T20:00:00Z", 20), false},
	} {
		n := brightMoonNote(site, c.b, c.a)
		if (n != "") != c.note {
			t.Errorf("%s: note %q, want a note %v", c.name, n, c.note)
		}
	}
}

// TestDurationsOneWay: every duration under a minute in whole seconds,
// tenths only under one second.
func TestDurationsOneWay(t *testing.T) {
	for _, c := range []struct {
		d    time.Duration
		want string
	}{{0, "0s"}, {200 * time.Millisecond, "0.2s"}, {48 * time.Second, "48s"}, {48900 * time.Millisecond, "49s"},
		{50 * time.Second, "50s"}, {59700 * time.Millisecond, "1m"}, {167 * time.Second, "2m47s"}, {3*time.Hour + 5*time.Minute, "3h05m"}} {
		if got := fmtDuration(c.d); got != c.want {
			t.Errorf("fmtDuration(%v) = %q, want %q", c.d, got, c.want)
		}
	}
}
