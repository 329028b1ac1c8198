package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

func runCLI(t *testing.T, args ...string) (stdout, stderr string, code int) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(args, &out, &errb)
	return out.String(), errb.String(), code
}

// The sky --json contract: field names fixed by issue 2, values equal to the
// package's (the CLI adds nothing of its own).
func TestSkyJSONContract(t *testing.T) {
	out, errs, code := runCLI(t, "sky", "--site", "44.12,5.24,650", "--at", "2027-01-15T06:30:00Z",
		"--ra", "83.82", "--dec", "-5.39", "--pressure-hpa", "0", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var m map[string]map[string]any
	var raw map[string]json.RawMessage
	if err := json.Unmarshal([]byte(out), &raw); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out)
	}
	for _, k := range []string{"time", "sun", "moon", "target"} {
		if _, ok := raw[k]; !ok {
			t.Errorf("missing top-level field %q", k)
		}
	}
	delete(raw, "time")
	b, _ := json.Marshal(raw)
	json.Unmarshal(b, &m)
	want := map[string][]string{
		"sun":    {"ra_deg", "dec_deg", "alt_deg", "az_deg"},
		"moon":   {"ra_deg", "dec_deg", "alt_deg", "az_deg", "illumination", "distance_km"},
		"target": {"ra_deg", "dec_deg", "alt_deg", "az_deg", "airmass", "moon_sep_deg", "sun_sep_deg"},
	}
	for obj, keys := range want {
		for _, k := range keys {
			if _, ok := m[obj][k]; !ok {
				t.Errorf("missing %s.%s", obj, k)
			}
		}
	}
	// Agreement with the package at the same instant.
	o, _ := ephem.NewObserver(44.12, 5.24, 650)
	o.SetAir(0, 10)
	s := ephem.Prepare(ephem.NewInstant(time.Date(2027, 1, 15, 6, 30, 0, 0, time.UTC)))
	l := s.Local(&o)
	st, _ := ephem.NewStar(83.82, -5.39, 0, 0)
	p := l.StarPlace(st.Direction(s.TT))
	const tol = 1e-9 // deg: the same computation
	if d := m["target"]["alt_deg"].(float64) - p.Alt*ephem.Rad2Deg; math.Abs(d) > tol {
		t.Errorf("target alt differs from the package by %g deg", d)
	}
	if d := m["moon"]["ra_deg"].(float64) - l.MoonPlace().RA*ephem.Rad2Deg; math.Abs(d) > tol {
		t.Errorf("moon RA differs from the package by %g deg", d)
	}
}

// An orbit target from a file: astrometric, distances and magnitude appear.
func TestSkyOrbitFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "comet.json")
	os.WriteFile(path, []byte(`{"q_au":0.42,"e":1.0021,"i_deg":131.4,"node_deg":33,"peri_deg":195,
		"perihelion_tt":"2027-01-21T06:00:00Z","m1":7.2,"k1":11}`), 0o644)
	out, errs, code := runCLI(t, "sky", "--site", "44.12,5.24,650", "--at", "2027-01-15T06:30:00Z", "--orbit", path, "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var r skyResult
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	if r.Target == nil || r.Target.DeltaAU == nil || r.Target.RAU == nil || r.Target.Magnitude == nil ||
		r.Target.AstrometricRADeg == nil || r.Target.AstrometricDecDeg == nil {
		t.Fatalf("orbit target fields missing: %s", out)
	}
	if *r.Target.RAU < 0.42 || r.Target.SunSepDeg > 30 {
		t.Errorf("r = %v AU, elongation %v deg: not the invented comet's morning geometry", *r.Target.RAU, r.Target.SunSepDeg)
	}
	// A fixed target has none of them, and a low target has a null airmass.
	out, _, _ = runCLI(t, "sky", "--site", "44.12,5.24", "--at", "2027-01-15T12:00:00Z", "--ra", "0", "--dec", "-80", "--json")
	if !strings.Contains(out, `"airmass":null`) || strings.Contains(out, "delta_au") {
		t.Errorf("below-horizon fixed target: %s", out)
	}
}

// Bad flags and bad files exit 2 with a message naming the flag.
func TestOfflineBadInput(t *testing.T) {
	dir := t.TempDir()
	badJSON := filepath.Join(dir, "bad.json")
	os.WriteFile(badJSON, []byte(`{"q_au": -1, "e": 0.5, "i_deg": 1, "node_deg": 1, "peri_deg": 1, "perihelion_tt": "2027-01-01T00:00:00Z"}`), 0o644)
	unknown := filepath.Join(dir, "unknown.json")
	os.WriteFile(unknown, []byte(`{"q": 1}`), 0o644)
	cases := []struct {
		args []string
		flag string
	}{
		{[]string{"sky", "--at", "2027-01-15T06:30:00Z"}, "--site"},
		{[]string{"sky", "--site", "95,5", "--at", "2027-01-15T06:30:00Z"}, "--site"},
		{[]string{"sky", "--site", "44,abc", "--at", "2027-01-15T06:30:00Z"}, "--site"},
		{[]string{"sky", "--site", "44,5", "--at", "yesterday"}, "--at"},
		{[]string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z", "--ra", "10"}, "--dec"},
		{[]string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z", "--ra", "400", "--dec", "1"}, "--ra"},
		{[]string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z", "--orbit", badJSON}, "--orbit"},
		{[]string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z", "--orbit", unknown}, "--orbit"},
		{[]string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z", "--orbit", filepath.Join(dir, "missing.json")}, "--orbit"},
		{[]string{"sky", "--site", "44,5", "--at", "2027-01-15T06:30:00Z", "--pressure-hpa", "-3"}, "--pressure-hpa"},
		{[]string{"night", "--site", "44,5", "--date", "2027-13-01"}, "--date"},
		{[]string{"night", "--site", "44,5"}, "--date"},
		{[]string{"night", "--site", "44,5", "--date", "2027-01-01", "--tz", "Mars/Olympus"}, "--tz"},
		{[]string{"night", "--bogus"}, "bogus"},
	}
	for _, c := range cases {
		_, errs, code := runCLI(t, c.args...)
		if code != 2 || !strings.Contains(errs, c.flag) {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 naming %s", c.args, code, errs, c.flag)
		}
	}
}

// night --json: the ten fields, RFC 3339 UTC with seconds, null when absent.
func TestNightJSONContract(t *testing.T) {
	out, errs, code := runCLI(t, "night", "--site", "65,25", "--date", "2026-06-21", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var m map[string]*string
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"sunset", "sunrise", "civil_dusk", "civil_dawn", "nautical_dusk", "nautical_dawn",
		"astronomical_dusk", "astronomical_dawn", "moonrise", "moonset"} {
		v, ok := m[k]
		if !ok {
			t.Errorf("missing %q", k)
			continue
		}
		if v != nil {
			if _, err := time.Parse(time.RFC3339, *v); err != nil || !strings.HasSuffix(*v, "Z") {
				t.Errorf("%s = %q, want RFC 3339 UTC", k, *v)
			}
		}
	}
	// Midsummer at 65 N: the Sun sets but no twilight ends.
	if m["sunset"] == nil || m["civil_dusk"] != nil || m["astronomical_dusk"] != nil {
		t.Errorf("65 N midsummer: %s", out)
	}
	table, _, code := runCLI(t, "night", "--site", "65,25", "--date", "2026-06-21", "--tz", "Europe/Helsinki")
	if code != 0 || !strings.Contains(table, "sunset") || !strings.Contains(table, "2026-06-22 00:22") {
		t.Errorf("table output:\n%s", table)
	}
}

// TestSkyOrbitBothForms: the short orbit file and the API's target JSON
// (the demo's CreateTargetRequest and a bare Target) give the same answer,
// and both are held to the API's limits by one validation
// (server.ValidateTarget): an eccentricity of 150 is refused in either form
// naming the API's field.
func TestSkyOrbitBothForms(t *testing.T) {
	dir := t.TempDir()
	bare := filepath.Join(dir, "bare.json")
	os.WriteFile(bare, []byte(`{"name":"NL-1","orbit":{"perihelionDistanceAu":0.42,"eccentricity":1.0021,"inclinationDeg":131.4,
		"ascendingNodeDeg":33,"perihelionArgumentDeg":195,"perihelionTimeTt":"2027-01-21T06:00:00Z","comet":{"m1":7.2,"k1":11}}}`), 0o644)
	args := func(f string) []string {
		return []string{"sky", "--site", "44.12,5.24,650", "--at", "2027-01-15T06:30:00Z", "--orbit", f, "--json"}
	}
	want, errs, code := runCLI(t, args("../../testdata/demo/comet-orbit.json")...)
	if code != 0 {
		t.Fatalf("short form: exit %d %s", code, errs)
	}
	// The API's CreateTargetRequest form (as the demo's comet was written
	// before it came from one-line elements).
	request := filepath.Join(dir, "request.json")
	os.WriteFile(request, []byte(`{"target":{"name":"Comet NL-1 (invented)","orbit":{"perihelionDistanceAu":0.42,"eccentricity":1.0021,
		"inclinationDeg":131.4,"ascendingNodeDeg":33,"perihelionArgumentDeg":195,"perihelionTimeTt":"2027-01-21T06:00:00Z",
		"comet":{"m1":7.2,"k1":11}}}}`), 0o644)
	for _, f := range []string{request, bare} {
		got, errs, code := runCLI(t, args(f)...)
		if code != 0 || got != want {
			t.Errorf("%s: exit %d %s\ngot  %s\nwant %s", f, code, errs, got, want)
		}
	}
	short := filepath.Join(dir, "short-e150.json")
	os.WriteFile(short, []byte(`{"q_au":0.42,"e":150,"i_deg":131.4,"node_deg":33,"peri_deg":195,"perihelion_tt":"2027-01-21T06:00:00Z"}`), 0o644)
	api := filepath.Join(dir, "api-e150.json")
	os.WriteFile(api, []byte(`{"target":{"name":"x","orbit":{"perihelionDistanceAu":0.42,"eccentricity":150,"inclinationDeg":131.4,
		"ascendingNodeDeg":33,"perihelionArgumentDeg":195,"perihelionTimeTt":"2027-01-21T06:00:00Z"}}}`), 0o644)
	for _, f := range []string{short, api} {
		_, errs, code := runCLI(t, args(f)...)
		if code != 2 || !strings.Contains(errs, "flag --orbit") || !strings.Contains(errs, "target.orbit.eccentricity") {
			t.Errorf("%s: exit %d, want 2 naming target.orbit.eccentricity: %s", f, code, errs)
		}
	}
}
