package main

import (
	"encoding/json"
	"strings"
	"testing"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestCatalogueOffline runs lookup, search, tonight and constellation.
// Identities from the standard cross-indexes (M 42 = NGC 1976 in Orion;
// M 13 the brightest globular of Hercules), from memory.
func TestCatalogueOffline(t *testing.T) {
	out, errs, code := runCLI(t, "catalogue", "lookup", "--name", "m042", "--json")
	if code != 0 {
		t.Fatalf("lookup: exit %d: %s", code, errs)
	}
	var lr pb.LookupNameResponse
	parse(t, out, &lr)
	if lr.GetEntry().GetId() != "NGC 1976" || lr.GetMatchedName() != "M 42" || lr.GetEntry().GetConstellation() != "Ori" {
		t.Errorf("lookup m042 = %v", &lr)
	}
	_, errs, code = runCLI(t, "catalogue", "lookup", "--name", "Betelguese")
	if code != 2 || !strings.Contains(errs, "--name") || !strings.Contains(errs, "Betelgeuse") {
		t.Errorf("unknown name: exit %d, stderr %q; want 2 naming --name and the nearest name", code, errs)
	}
	_, errs, code = runCLI(t, "catalogue", "lookup", "--name", "Rosette Nebula")
	if code != 2 || !strings.Contains(errs, "ambiguous") || !strings.Contains(errs, "NGC 2244") {
		t.Errorf("ambiguous name: exit %d, stderr %q", code, errs)
	}

	out, errs, code = runCLI(t, "catalogue", "search", "--type", "globular cluster", "--constellation", "Hercules", "--mag-limit", "8", "--json")
	if code != 0 {
		t.Fatalf("search: exit %d: %s", code, errs)
	}
	var sr pb.SearchCatalogueResponse
	parse(t, out, &sr)
	if len(sr.GetEntries()) == 0 || sr.GetEntries()[0].GetMessier() != 13 {
		t.Errorf("globulars in Her: %v", sr.GetEntries())
	}
	for _, bad := range [][]string{{"--constellation", "Atlantis"}, {"--type", "spaceship"}, {"--mag-limit", "bright"}} {
		_, errs, code = runCLI(t, append([]string{"catalogue", "search"}, bad...)...)
		if code != 2 || !strings.Contains(errs, strings.TrimPrefix(bad[0], "-")) {
			t.Errorf("search %v: exit %d, stderr %q; want 2 naming %s", bad, code, errs, bad[0])
		}
	}

	out, errs, code = runCLI(t, "catalogue", "tonight", "--site", "44.12,5.24,650", "--date", "2027-01-14", "--mag-limit", "6", "--limit", "0", "--json")
	if code != 0 {
		t.Fatalf("tonight: exit %d: %s", code, errs)
	}
	var tj tonightJSON
	if err := json.Unmarshal([]byte(out), &tj); err != nil {
		t.Fatal(err)
	}
	ids := map[string]bool{}
	for _, o := range tj.Objects {
		ids[o.ID] = true
		if o.MaxAltDeg < 30 || o.Magnitude == nil || *o.Magnitude > 6 {
			t.Errorf("tonight: %+v", o)
		}
	}
	if !ids["NGC 1976"] || tj.DarkStart == nil {
		t.Errorf("tonight in January: M 42 listed %v, dark from %v", ids["NGC 1976"], tj.DarkStart)
	}

	out, _, code = runCLI(t, "catalogue", "constellation", "--ra", "83.82", "--dec", "-5.39")
	if code != 0 || !strings.HasPrefix(out, "Orion (Ori)") {
		t.Errorf("constellation of M 42's place: %q", out)
	}
}

// TestSkyConstellation: `sky --json` gains target.constellation (issue 19)
// and --name resolves a target offline; the fields of issue 2 stay.
func TestSkyConstellation(t *testing.T) {
	out, errs, code := runCLI(t, "sky", "--site", "44.12,5.24,650", "--at", "2027-01-15T00:00:00Z", "--name", "Vega", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var m struct {
		Target map[string]any `json:"target"`
	}
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatal(err)
	}
	if m.Target["constellation"] != "Lyr" || m.Target["catalogue_id"] != "HIP 91262" || m.Target["alt_deg"] == nil {
		t.Errorf("sky --name Vega: target %v", m.Target)
	}
	if !strings.Contains(errs, "Vega = HIP 91262") {
		t.Errorf("sky --name does not say which entry it chose: %q", errs)
	}
}

// TestTargetCreateByName creates fixed targets from catalogue names through
// the daemon; the client says which entry it chose.
func TestTargetCreateByName(t *testing.T) {
	d := startTestDaemon(t)
	r := d.cli(t, "target", "create", "--name", "M 31", "--json").ok(t, "target create --name M 31")
	var resp pb.CreateTargetResponse
	parse(t, r.stdout, &resp)
	f := resp.GetTarget().GetFixed()
	if resp.GetTarget().GetName() != "M 31" || f.GetCatalogueId() != "NGC 224" || f.GetRaDeg() < 10.6 || f.GetRaDeg() > 10.7 {
		t.Errorf("created %v", resp.GetTarget())
	}
	if !strings.Contains(r.stderr, "M 31 = NGC 224 (Andromeda Galaxy)") {
		t.Errorf("stderr %q does not say which entry was chosen", r.stderr)
	}
	r = d.cli(t, "target", "create", "--name", "Andromda Galaxy")
	if r.code != 2 || !strings.Contains(r.stderr, "Andromeda Galaxy") {
		t.Errorf("unknown name: exit %d, stderr %q", r.code, r.stderr)
	}
}

// TestFinderChart draws the invented comet's track over eight mornings as
// PNG and SVG and tells where it crosses into the next constellation.
func TestFinderChart(t *testing.T) {
	dir := t.TempDir()
	for _, ext := range []string{".png", ".svg"} {
		out := dir + "/finder" + ext
		stdout, errs, code := runCLI(t, "catalogue", "finder", "--orbit", demoFile("comet-orbit.json"),
			"--from", "2027-01-10T06:00:00Z", "--nights", "8", "--out", out, "--title", "Comet NL-1 (invented)")
		if code != 0 {
			t.Fatalf("finder %s: exit %d: %s", ext, code, errs)
		}
		if !strings.Contains(stdout, "moves from Serpens into Sagittarius") || strings.Count(stdout, "2027-01-") != 9 {
			t.Errorf("finder output:\n%s", stdout)
		}
		if ext == ".png" {
			checkPNG(t, out)
		} else if b := mustRead(t, out); !strings.Contains(b, "<svg") || !strings.Contains(b, "01-14") {
			t.Errorf("SVG lacks the dates along the track")
		}
	}
	_, errs, code := runCLI(t, "catalogue", "finder", "--orbit", demoFile("comet-orbit.json"), "--from", "2027-01-10T06:00:00Z", "--nights", "1")
	if code != 2 || !strings.Contains(errs, "--nights") {
		t.Errorf("one night: exit %d, %q", code, errs)
	}
}
