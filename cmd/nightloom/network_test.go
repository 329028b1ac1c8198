package main

import (
	"image/png"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// The network commands against a real daemon with the demo's two sites:
// capability flags on site create and update, network create/list/show,
// a block queued for the network with --sites and --min-aperture,
// `plan make --network` as a table ordered by UTC with the site in each
// row and one chart per site, and the refusals naming their flag.
func TestNetworkCommands(t *testing.T) {
	d := startTestDaemon(t)
	site, _, _ := loadScenario(t, d)
	var wr pb.CreateSiteResponse
	parse(t, d.cli(t, "site", "create", "--file", demoFile("site-west.json"), "--aperture-mm", "250", "--json").ok(t, "site create west").stdout, &wr)
	west := wr.GetSite()
	if west.GetInstrument().GetApertureMm() != 250 {
		t.Fatalf("--aperture-mm 250 gave aperture %v", west.GetInstrument().GetApertureMm())
	}
	// --filters replaces the wheel alone (the rest of the site stays).
	empty := filepath.Join(t.TempDir(), "empty.json")
	if err := os.WriteFile(empty, []byte(`{}`), 0o600); err != nil {
		t.Fatal(err)
	}
	var ur pb.UpdateSiteResponse
	parse(t, d.cli(t, "site", "update", "--file", empty, "--site", west.GetId(), "--filters", "L,R,G,B,V", "--json").ok(t, "site update").stdout, &ur)
	if got := ur.GetSite().GetInstrument().GetFilters(); !slices.Equal(got, []string{"L", "R", "G", "B", "V"}) || ur.GetSite().GetName() != west.GetName() ||
		ur.GetSite().GetInstrument().GetApertureMm() != 250 {
		t.Fatalf("site update --filters: %v", ur.GetSite())
	}

	d.cli(t, "network", "create", "--name", "Two Owls (invented)", "--sites", site.GetName()+","+west.GetId(), "--description", "test").ok(t, "network create")
	out := d.cli(t, "network", "show", "--network", "Two Owls (invented)").ok(t, "network show").stdout
	for _, want := range []string{site.GetName(), west.GetName(), "250 mm", "America/Phoenix"} {
		if !strings.Contains(out, want) {
			t.Errorf("network show lacks %q:\n%s", want, out)
		}
	}
	if out := d.cli(t, "network", "list").ok(t, "network list").stdout; !strings.Contains(out, "Two Owls (invented)") {
		t.Errorf("network list:\n%s", out)
	}

	// The eclipsing binary for the network, only where 300 mm or more is
	// available: the western site (250 mm) may not take it.
	blocks := strings.ReplaceAll(mustRead(t, demoFile("network-blocks.json")), `"networkId": "NETWORK_ID",`, "")
	f := filepath.Join(t.TempDir(), "network-blocks.json")
	if err := os.WriteFile(f, []byte(blocks), 0o600); err != nil {
		t.Fatal(err)
	}
	var qr pb.QueueBlocksResponse
	parse(t, d.cli(t, "block", "queue", "--file", f, "--network", "Two Owls (invented)", "--min-aperture", "300", "--json").ok(t, "block queue --network").stdout, &qr)
	b := qr.GetBlocks()[0]
	if b.GetNetworkId() == "" || b.GetSiteId() != site.GetId() || b.GetNeeds().GetMinApertureMm() != 300 {
		t.Fatalf("queued network block: %v", b)
	}
	dir := t.TempDir()
	res := d.cli(t, "plan", "make", "--network", "Two Owls (invented)", "--night", "2027-01-15", "--budget", "300ms", "--seed", "3",
		"--chart-dir", dir).ok(t, "plan make --network")
	// One table ordered by UTC, the site named in each row; no run of the
	// star at the site too small for it.
	row := regexp.MustCompile(`(?m)^(\d\d-\d\d \d\d:\d\d)\s+\d\d:\d\d\s+(.+?)\s{2,}\d\d:\d\d\s+(.+?)\s{2,}`)
	var last string
	rows := 0
	for _, m := range row.FindAllStringSubmatch(res.stdout, -1) {
		rows++
		if m[1] < last {
			t.Errorf("row at %s after %s: not in UTC order", m[1], last)
		}
		last = m[1]
		if m[2] != site.GetName() && m[2] != west.GetName() {
			t.Errorf("row names site %q", m[2])
		}
		if m[2] == west.GetName() && strings.HasPrefix(m[3], "NLV 59") {
			t.Errorf("the 300 mm block runs at the 250 mm site: %s", m[0])
		}
	}
	if rows < 10 || !strings.Contains(res.stdout, "start UTC") {
		t.Fatalf("plan make --network printed %d rows:\n%s", rows, res.stdout)
	}
	for _, id := range []string{site.GetId(), west.GetId()} {
		p := filepath.Join(dir, id+"-2027-01-15.png")
		fh, err := os.Open(p)
		if err != nil {
			t.Fatalf("chart of %s: %v", id, err)
		}
		if _, err := png.Decode(fh); err != nil {
			t.Errorf("%s is not a PNG: %v", p, err)
		}
		fh.Close()
	}

	// A replan of the network from the small hours, with clouds at home.
	rp := d.cli(t, "network", "replan", "--network", "Two Owls (invented)", "--from", "2027-01-16T01:00:00Z", "--budget", "200ms",
		"--closure", site.GetName()+"=2027-01-16T01:00:00Z/+3h/clouds").ok(t, "network replan").stdout
	if !strings.Contains(rp, "version 2") {
		t.Errorf("network replan did not store second versions:\n%s", rp)
	}

	// Refusals name their flag and exit 2.
	for _, c := range []struct {
		args []string
		flag string
	}{
		{[]string{"plan", "make", "--network", "Two Owls (invented)", "--site", site.GetId(), "--night", "2027-01-15"}, "--network"},
		{[]string{"plan", "make", "--network", "Two Owls (invented)"}, "--night"},
		{[]string{"plan", "make", "--site", site.GetId(), "--night", "2027-01-15", "--chart-dir", dir}, "--chart-dir"},
		{[]string{"block", "queue", "--file", f, "--min-aperture", "300"}, "--min-aperture"},
		{[]string{"network", "create", "--sites", site.GetId()}, "--name"},
		{[]string{"network", "show", "--network", "Nowhere"}, "--network"},
		{[]string{"network", "replan", "--network", "Two Owls (invented)", "--closure", "2027-01-16T01:00:00Z/+1h"}, "--closure"},
	} {
		r := d.cli(t, c.args...)
		if r.code != 2 || !strings.Contains(r.stderr, "flag "+c.flag) {
			t.Errorf("%v: exit %d, want 2 naming %s\n%s", c.args, r.code, c.flag, r.stderr)
		}
	}
}
