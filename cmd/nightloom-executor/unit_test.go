package main

import (
	"errors"
	"io"
	"math"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/ephem"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func testSite() *pb.Site {
	floor := 30.0
	return &pb.Site{LatitudeDeg: 44.12, LongitudeDeg: 5.24, ElevationM: 650, TimeZone: "Europe/Paris", SolarAvoidanceDeg: &floor,
		Horizon: []*pb.HorizonPoint{{AzimuthDeg: 0, AltitudeDeg: 5}, {AzimuthDeg: 90, AltitudeDeg: 25}, {AzimuthDeg: 180, AltitudeDeg: 5}, {AzimuthDeg: 270, AltitudeDeg: 5}}}
}

// assignmentAt is a one-minute run starting at `at`, pointed at an
// apparent place of date.
func assignmentAt(at time.Time, raDeg, decDeg float64) *pb.Assignment {
	return &pb.Assignment{Start: timestamppb.New(at), End: timestamppb.New(at.Add(time.Minute)),
		Pointing: &pb.Pointing{RaApparentDeg: raDeg, DecApparentDeg: decDeg}}
}

// The executor refuses, on its own, a pointing near the Sun and one below
// the horizon profile, whatever the plan says. The Sun's place comes from
// the domain's ephemerides (ephem, checked there against published
// tables); here the check is the refusal logic around it.
func TestCheckSlew(t *testing.T) {
	sky, err := newSiteSky(testSite())
	if err != nil {
		t.Fatal(err)
	}
	noon := time.Date(2026, 6, 21, 11, 40, 0, 0, time.UTC)
	snap := ephem.Prepare(ephem.NewInstant(noon))
	l := snap.Local(&sky.obs)
	sun := l.SunPlace()
	sunRA, sunDec := sun.RA/deg, sun.Dec/deg

	night := time.Date(2026, 12, 4, 23, 0, 0, 0, time.UTC)
	sn := ephem.Prepare(ephem.NewInstant(night))
	ln := sn.Local(&sky.obs)
	zenithRA := ln.LAST / deg
	for _, tc := range []struct {
		name    string
		at      time.Time
		ra, dec float64
		want    error
	}{
		{"at the Sun", noon, sunRA, sunDec, errSunTooClose},
		{"20 deg from the Sun, floor 30", noon, sunRA, sunDec + 20, errSunTooClose},
		{"near the zenith at night", night, zenithRA, 44.12, nil},
		{"below the geometric horizon", night, math.Mod(zenithRA+180, 360), -60, errBelowHorizon},
		// East at 15 deg altitude stands under the 25 deg of the profile:
		// hour angle -90 deg + a bit at dec 10 is low in the east.
		{"under the horizon profile in the east", night, math.Mod(zenithRA+80, 360), 10, errBelowHorizon},
	} {
		a := assignmentAt(tc.at, tc.ra, tc.dec)
		err := sky.checkSlew(a, tc.at)
		if !errors.Is(err, tc.want) {
			lk := sky.lookAt(tc.at, tc.ra, tc.dec)
			t.Errorf("%s: err %v, want %v (alt %.1f az %.1f horizon %.1f sun sep %.1f)", tc.name, err, tc.want, lk.altDeg, lk.azDeg, lk.horizonDeg, lk.sunSepDeg)
		}
	}
}

// The report id depends on the assignment and the frames already kept,
// nothing else: the same run after a restart gets the same id.
func TestRunIDDeterministic(t *testing.T) {
	start := time.Date(2026, 12, 4, 23, 0, 0, 0, time.UTC)
	a := runIDFor("plan-1", "blk-1", start, 0)
	if b := runIDFor("plan-1", "blk-1", start.In(time.FixedZone("x", 3600)), 0); a != b {
		t.Errorf("same instant in another zone: %s vs %s", a, b)
	}
	for _, other := range []string{runIDFor("plan-2", "blk-1", start, 0), runIDFor("plan-1", "blk-2", start, 0),
		runIDFor("plan-1", "blk-1", start.Add(time.Second), 0), runIDFor("plan-1", "blk-1", start, 3)} {
		if other == a {
			t.Errorf("different runs share id %s", a)
		}
	}
}

func TestFlags(t *testing.T) {
	base := []string{"--site", "s1", "--out", "/tmp/x"}
	for _, tc := range []struct {
		args     []string
		wantFlag string
	}{
		{nil, "--site"},
		{[]string{"--site", "s1"}, "--out"},
		{append(base, "--filters", "L=1,R=1"), "--filters"},
		{append(base, "--filters", "L=0"), "--filters"},
		{append(base, "--filters", "L"), "--filters"},
		{append(base, "--indi", "nohost"), "--indi"},
		{append(base, "--server", ":7450"), "--server"},
		{append(base, "--park-sun-alt-deg", "5"), "--park-sun-alt-deg"},
		{append(base, "--poll", "10ms"), "--poll"},
	} {
		_, err := parseFlags(tc.args, io.Discard)
		if err == nil || !strings.Contains(err.Error(), tc.wantFlag) {
			t.Errorf("%v: err %v, want one naming %s", tc.args, err, tc.wantFlag)
		}
	}
	o, err := parseFlags(append(base, "--filters", "L=8, R=1,G=2"), io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if o.filters["L"] != 8 || o.filters["R"] != 1 || o.filters["G"] != 2 || len(o.filters) != 3 {
		t.Errorf("filters %v", o.filters)
	}
}

// A moving target's pointing moves with its rate: 60 arcsec/min in Dec for
// 2 minutes is 2 arcmin; 30 arcsec/min of RA*cos(Dec) at Dec 60 is 60
// arcsec/min of RA.
func TestPointingAtMovingTarget(t *testing.T) {
	start := time.Date(2026, 12, 4, 23, 0, 0, 0, time.UTC)
	a := &pb.Assignment{Start: timestamppb.New(start), Pointing: &pb.Pointing{RaApparentDeg: 100, DecApparentDeg: 60},
		Rate: &pb.NonSiderealRate{RaCosDecArcsecPerMin: 30, DecArcsecPerMin: 60}}
	ra, dec, err := pointingAt(a, start.Add(2*time.Minute))
	if err != nil {
		t.Fatal(err)
	}
	const tol = 1e-9
	if math.Abs(dec-(60+2.0/60)) > tol || math.Abs(ra-(100+2.0/60)) > tol {
		t.Errorf("moved to %.6f %.6f, want %.6f %.6f", ra, dec, 100+2.0/60, 60+2.0/60)
	}
}

// The trapezoidal profile (constant acceleration a to the rate v, cruise,
// constant deceleration): a move of d >= v*v/a takes d/v + v/a (elementary
// kinematics). Slews generated from v = 4 deg/s, a = 2 deg/s^2 give them
// back.
func TestFitSlews(t *testing.T) {
	const v, a, tol = 4.0, 2.0, 1e-9
	var d, secs []float64
	for _, x := range []float64{10, 40, 90} {
		d, secs = append(d, x), append(secs, x/v+v/a)
	}
	rate, acc, ok := fitSlews(d, secs)
	if !ok || math.Abs(rate-v) > tol || math.Abs(acc-a) > tol {
		t.Errorf("fit %v %v %v, want %v %v", rate, acc, ok, v, a)
	}
	if _, _, ok := fitSlews([]float64{10, 10}, []float64{3, 3}); ok {
		t.Error("one length fitted")
	}
}

// Dispatch moves a run's start by recomputed overheads and returns a run in
// progress as planned: the same assignment then comes back with a start a
// few seconds apart; consecutive runs of one block only touch.
func TestSameAssignment(t *testing.T) {
	at := func(s int) time.Time {
		return time.Date(2026, 12, 4, 18, 9, 0, 0, time.UTC).Add(time.Duration(s) * time.Second)
	}
	for _, tc := range []struct {
		s1, e1, s2, e2 int
		want           bool
	}{
		{57, 69, 56, 68, true},  // moved by a second
		{46, 58, 56, 68, false}, // the next run of the block, 2 s overlap after a late start
		{0, 12, 12, 24, false},  // back to back
		{0, 12, 0, 12, true},
	} {
		if got := sameAssignment(at(tc.s1), at(tc.e1), at(tc.s2), at(tc.e2)); got != tc.want {
			t.Errorf("%+v: %v", tc, got)
		}
	}
}

// A mount with no measurable acceleration time: t = d/v exactly.
func TestFitSlewsNoAcceleration(t *testing.T) {
	rate, acc, ok := fitSlews([]float64{16, 70, 97}, []float64{16.0 / 4, 70.0 / 4, 97.0 / 4})
	if !ok || math.Abs(rate-4) > 1e-9 || acc != 0 {
		t.Errorf("fit %v %v %v, want rate 4 and no acceleration", rate, acc, ok)
	}
}
