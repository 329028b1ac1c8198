package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// An invented comet in the one-line comet format (columns as in package
// ephem/elements) and an invented minor planet in the minor-planet format.
const (
	cliCometLine = "    CK31X010  2032 01 14.5282  0.214760  1.000412  128.3342  301.9915  141.0077  20320120   6.5  4.0  C/2031 X1 (Invented)"
	cliMinorLine = "K29B07Q 15.31  0.15 K31AH 200.12345   85.54321  123.45678   10.98765  0.1834567  0.21249448   2.7812345"
)

// sky --body: a planet's place, distances, astrometric direction and
// magnitude appear and equal the package's at the same instant.
func TestSkyBody(t *testing.T) {
	out, errs, code := runCLI(t, "sky", "--site", "44.12,5.24,650", "--at", "2027-01-15T19:00:00Z", "--body", "Jupiter",
		"--pressure-hpa", "0", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var r skyResult
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	tg := r.Target
	if tg == nil || tg.DeltaAU == nil || tg.RAU == nil || tg.Magnitude == nil || tg.AstrometricRADeg == nil || tg.AstrometricDecDeg == nil {
		t.Fatalf("planet fields missing: %s", out)
	}
	o, _ := ephem.NewObserver(44.12, 5.24, 650)
	o.SetAir(0, 10)
	s := ephem.Prepare(ephem.NewInstant(time.Date(2027, 1, 15, 19, 0, 0, 0, time.UTC)))
	l := s.Local(&o)
	m, _ := ephem.NewBody(ephem.Jupiter)
	p, _, geo := l.OrbitPlace(m)
	const tol = 1e-9 // deg, AU, mag: the same computation
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"alt", tg.AltDeg, p.Alt * ephem.Rad2Deg}, {"ra", tg.RADeg, p.RA * ephem.Rad2Deg}, {"delta", *tg.DeltaAU, geo.DeltaAU},
		{"r", *tg.RAU, geo.RAU}, {"mag", *tg.Magnitude, geo.Magnitude}} {
		if math.Abs(c.got-c.want) > tol {
			t.Errorf("%s: CLI %v, package %v", c.name, c.got, c.want)
		}
	}
	// The Moon as target sits where the sky's Moon is.
	out, errs, code = runCLI(t, "sky", "--site", "44.12,5.24,650", "--at", "2027-01-15T19:00:00Z", "--body", "moon", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	const moonTolDeg = 1.0 / 3600 // the two paths differ only by sub-metre terms
	if r.Target.MoonSepDeg > moonTolDeg {
		t.Errorf("Moon target %.6f deg from the sky's Moon", r.Target.MoonSepDeg)
	}
}

// sky --elements: the one-line comet gives the same place as the same
// elements typed into an --orbit JSON file; --designation picks a line.
func TestSkyElements(t *testing.T) {
	dir := t.TempDir()
	el := filepath.Join(dir, "elements.txt")
	os.WriteFile(el, []byte(cliCometLine+"\n"+cliMinorLine+"\n"), 0o644)
	js := filepath.Join(dir, "comet.json")
	os.WriteFile(js, []byte(`{"q_au":0.21476,"e":1.000412,"i_deg":141.0077,"node_deg":301.9915,"peri_deg":128.3342,
		"perihelion_tt":"2032-01-14T12:40:36.48Z","m1":6.5,"k1":10}`), 0o644)
	args := []string{"sky", "--site", "44.12,5.24,650", "--at", "2032-01-10T05:00:00Z", "--json"}
	a, errs, code := runCLI(t, append(args, "--elements", el, "--designation", "C/2031 X1")...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	b, errs, code := runCLI(t, append(args, "--orbit", js)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var ra, rb skyResult
	json.Unmarshal([]byte(a), &ra)
	json.Unmarshal([]byte(b), &rb)
	const tolArcsec = 0.001
	sep := ephem.Separation(ephem.SphericalToVec(*ra.Target.AstrometricRADeg*ephem.Deg2Rad, *ra.Target.AstrometricDecDeg*ephem.Deg2Rad),
		ephem.SphericalToVec(*rb.Target.AstrometricRADeg*ephem.Deg2Rad, *rb.Target.AstrometricDecDeg*ephem.Deg2Rad)) * ephem.Rad2Arcsec
	if sep > tolArcsec {
		t.Errorf("--elements and --orbit differ by %.6f arcsec", sep)
	}
	// Two lines and no --designation: refused, naming the flag.
	_, errs, code = runCLI(t, append(args, "--elements", el)...)
	if code != 2 || !strings.Contains(errs, "elements") {
		t.Errorf("two lines without --designation: exit %d, %q", code, errs)
	}
}

// Bad --body and --elements input exits 2 naming the flag, and a
// malformed line is reported with its line number and columns.
func TestSkySolarBadInput(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "bad.txt")
	os.WriteFile(bad, []byte("# one bad line\n"+strings.Replace(cliCometLine, "0.214760", "0.2x4760", 1)+"\n"), 0o644)
	at := []string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z"}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--body", "pluto"}, "--body"},
		{[]string{"--body", "mars", "--ra", "1", "--dec", "1"}, "--body"},
		{[]string{"--designation", "X"}, "--designation"},
		{[]string{"--elements", bad}, "line 2, columns 31-39"},
		{[]string{"--elements", filepath.Join(dir, "missing.txt")}, "--elements"},
	} {
		_, errs, code := runCLI(t, append(append([]string{}, at...), c.args...)...)
		if code != 2 || !strings.Contains(errs, c.want) {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 with %q", c.args, code, errs, c.want)
		}
	}
}

// target import against a real daemon: the file's lines become orbit
// targets, a second run of the same file stores nothing new, and a bad line
// is refused with its line and columns.
func TestTargetImport(t *testing.T) {
	d := startTestDaemon(t)
	dir := t.TempDir()
	good := filepath.Join(dir, "good.txt")
	os.WriteFile(good, []byte(cliCometLine+"\n"+cliMinorLine+"\n"), 0o644)
	var r1, r2 pb.ImportElementsResponse
	parse(t, d.cli(t, "target", "import", "--elements", good, "--json").ok(t, "import").stdout, &r1)
	parse(t, d.cli(t, "target", "import", "--elements", good, "--json").ok(t, "import again").stdout, &r2)
	if len(r1.GetTargets()) != 2 || r2.GetTargets()[0].GetId() != r1.GetTargets()[0].GetId() {
		t.Fatalf("imports: %v then %v", r1.GetTargets(), r2.GetTargets())
	}
	list := d.cli(t, "target", "list").ok(t, "list").stdout
	if strings.Count(list, "orbit") != 2 || !strings.Contains(list, "C/2031 X1 (Invented)") {
		t.Errorf("target list after two imports of one file:\n%s", list)
	}
	bad := filepath.Join(dir, "bad.txt")
	os.WriteFile(bad, []byte(cliMinorLine+"\n"+strings.Replace(cliCometLine, "2032 01", "2032 13", 1)+"\n"), 0o644)
	res := d.cli(t, "target", "import", "--elements", bad)
	if res.code == 0 || !strings.Contains(res.stderr, "line 2, columns 20-21") {
		t.Errorf("bad file: exit %d, stderr %q", res.code, res.stderr)
	}
	res = d.cli(t, "target", "import")
	if res.code != 2 || !strings.Contains(res.stderr, "--elements") {
		t.Errorf("no --elements: exit %d, stderr %q", res.code, res.stderr)
	}
}

// outlook against a real daemon: the demo's comet imported from its
// one-line file, a table with the first and last nights, JSON, a chart.
func TestOutlookCommand(t *testing.T) {
	d := startTestDaemon(t)
	var sr pb.CreateSiteResponse
	parse(t, d.cli(t, "site", "create", "--file", demoFile("site.json"), "--json").ok(t, "site create").stdout, &sr)
	var ir pb.ImportElementsResponse
	parse(t, d.cli(t, "target", "import", "--elements", demoFile("comet-elements.txt"), "--json").ok(t, "import").stdout, &ir)
	args := []string{"outlook", "--site", sr.GetSite().GetId(), "--target", ir.GetTargets()[0].GetId(), "--from", "2027-01-10",
		"--nights", "16", "--darkness", "civil", "--min-alt-deg", "5", "--min-elongation-deg", "18"}
	out := d.cli(t, args...).ok(t, "outlook").stdout
	if !strings.Contains(out, "first night 2027-01-10") || !strings.Contains(out, "below horizon profile") {
		t.Errorf("outlook table:\n%s", out)
	}
	var resp pb.OutlookResponse
	parse(t, d.cli(t, append(args, "--json")...).ok(t, "outlook --json").stdout, &resp)
	if len(resp.GetNights()) != 16 || resp.GetLastObservableNight() == nil {
		t.Fatalf("outlook --json: %d nights, last %v", len(resp.GetNights()), resp.GetLastObservableNight())
	}
	png := filepath.Join(t.TempDir(), "outlook.png")
	if p := os.Getenv("NIGHTLOOM_KEEP_OUTLOOK_PNG"); p != "" {
		png = p
	}
	d.cli(t, append(args, "--chart", png)...).ok(t, "outlook --chart")
	checkPNG(t, png)
	if r := d.cli(t, "outlook", "--site", "x", "--target", "y"); r.code != 2 || !strings.Contains(r.stderr, "--from") {
		t.Errorf("no --from: exit %d, %q", r.code, r.stderr)
	}
}

// comet magnitude / refit / history against a real daemon: magnitudes
// written from a known law (M1 6.0, K1 10 for the demo comet, no noise)
// are fitted back, applied, drawn and listed.
func TestCometRefitCommands(t *testing.T) {
	d := startTestDaemon(t)
	dir := t.TempDir()
	var ir pb.ImportElementsResponse
	parse(t, d.cli(t, "target", "import", "--elements", demoFile("comet-elements.txt"), "--json").ok(t, "import").stdout, &ir)
	id := ir.GetTargets()[0].GetId()
	c, err := readElements(demoFile("comet-elements.txt"), "")
	if err != nil {
		t.Fatal(err)
	}
	var zero ephem.Vec3
	for i := 0; i < 6; i++ {
		at := time.Date(2027, 1, 2+3*i, 6, 0, 0, 0, time.UTC)
		s := ephem.Prepare(ephem.NewInstant(at))
		w := c.Observe(s.TT, s.EarthPos, s.EarthVel, zero, zero)
		m := 6.0 + 5*math.Log10(w.DeltaAU) + 10*math.Log10(w.RAU)
		d.cli(t, "comet", "magnitude", "--target", id, "--at", at.Format(time.RFC3339), "--mag", fmt.Sprintf("%.3f", m),
			"--sigma-mag", "0.1").ok(t, "comet magnitude")
	}
	png := filepath.Join(dir, "light.png")
	if p := os.Getenv("NIGHTLOOM_KEEP_LIGHT_PNG"); p != "" {
		png = p
	}
	out := d.cli(t, "comet", "refit", "--target", id, "--apply", "--chart", png).ok(t, "comet refit").stdout
	if !strings.Contains(out, "M1 6.00") || !strings.Contains(out, "applied") {
		t.Errorf("refit output:\n%s", out)
	}
	checkPNG(t, png)
	hist := d.cli(t, "comet", "history", "--target", id).ok(t, "comet history").stdout
	if strings.Count(hist, "obs-") != 6 || !strings.Contains(hist, "true") {
		t.Errorf("history:\n%s", hist)
	}
	if r := d.cli(t, "comet", "magnitude", "--target", id, "--at", "2027-01-02T06:00:00Z"); r.code != 2 || !strings.Contains(r.stderr, "--mag") {
		t.Errorf("no --mag: exit %d, %q", r.code, r.stderr)
	}
}
