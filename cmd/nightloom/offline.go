package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/catalogue"
	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/ephem/elements"
	"github.com/nightloom/nightloom/internal/server"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// newFlagSet returns a flag set that reports errors to us instead of
// exiting, and prints its usage to stderr on -h.
func newFlagSet(name string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	return fs
}

// parseFlags parses and turns the flag package's errors into usage errors.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return &usageError{err.Error()}
	}
	if fs.NArg() > 0 {
		return &usageError{fmt.Sprintf("unexpected argument %q", fs.Arg(0))}
	}
	return nil
}

// parseSite reads LAT,LON[,ELEV_M] (degrees, east positive, metres).
func parseSite(flagName, s string) (ephem.Observer, error) {
	if s == "" {
		return ephem.Observer{}, flagError(flagName, "required, as LAT,LON[,ELEV_M]")
	}
	parts := strings.Split(s, ",")
	if len(parts) < 2 || len(parts) > 3 {
		return ephem.Observer{}, flagError(flagName, "want LAT,LON[,ELEV_M], got %q", s)
	}
	var v [3]float64
	for i, p := range parts {
		x, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			return ephem.Observer{}, flagError(flagName, "%q is not a number", p)
		}
		v[i] = x
	}
	o, err := ephem.NewObserver(v[0], v[1], v[2])
	if err != nil {
		return ephem.Observer{}, flagError(flagName, "%v", strings.TrimPrefix(err.Error(), "ephem: "))
	}
	return o, nil
}

// orbitFile is the JSON form of an orbit target for `nightloom sky --orbit`.
type orbitFile struct {
	QAU          *float64 `json:"q_au"`
	E            *float64 `json:"e"`
	IncDeg       *float64 `json:"i_deg"`
	NodeDeg      *float64 `json:"node_deg"`
	PeriDeg      *float64 `json:"peri_deg"`
	PerihelionTT string   `json:"perihelion_tt"`
	M1           *float64 `json:"m1"`
	K1           *float64 `json:"k1"`
}

// readOrbit loads an orbit file and validates it as the API validates a
// target (server.ValidateTarget, one set of limits for both). Two forms
// are read:
//
//   - the API's target JSON (the canonical protobuf JSON mapping), a Target
//     or a CreateTargetRequest ({"target": {...}}), as in testdata/demo;
//   - the short form {"q_au", "e", "i_deg", "node_deg", "peri_deg",
//     "perihelion_tt", "m1", "k1"} that scripts already use.
//
// A fixed target in the API's form is accepted too and returned as a star.
func readOrbit(path string) (ephem.Mover, *ephem.Star, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, nil, flagError("orbit", "%v", err)
	}
	t, err := orbitTarget(path, data)
	if err != nil {
		return nil, nil, err
	}
	ct, err := server.ValidateTarget(t)
	if err != nil {
		return nil, nil, flagError("orbit", "%s: %v", path, err)
	}
	if ct.Orbit == nil {
		return nil, ct.Star, nil
	}
	return ct.Orbit, ct.Star, nil
}

// orbitTarget decodes either form of an orbit file into the API's Target.
func orbitTarget(path string, data []byte) (*pb.Target, error) {
	var probe map[string]json.RawMessage
	if err := json.Unmarshal(data, &probe); err != nil {
		return nil, flagError("orbit", "%s: %v", path, err)
	}
	if _, short := probe["q_au"]; !short {
		if _, isReq := probe["target"]; isReq {
			req := &pb.CreateTargetRequest{}
			if err := parseRequest(path, data, req); err != nil {
				return nil, err
			}
			return req.GetTarget(), nil
		}
		if _, isTarget := probe["orbit"]; isTarget || probe["fixed"] != nil || probe["name"] != nil {
			t := &pb.Target{}
			if err := parseRequest(path, data, t); err != nil {
				return nil, err
			}
			return t, nil
		}
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var f orbitFile
	if err := dec.Decode(&f); err != nil {
		return nil, flagError("orbit", "%s: %v", path, err)
	}
	if _, err := dec.Token(); err != io.EOF {
		return nil, flagError("orbit", "%s: data after the JSON object", path)
	}
	need := []struct {
		name string
		v    *float64
	}{{"q_au", f.QAU}, {"e", f.E}, {"i_deg", f.IncDeg}, {"node_deg", f.NodeDeg}, {"peri_deg", f.PeriDeg}}
	for _, n := range need {
		if n.v == nil {
			return nil, flagError("orbit", "%s: field %q is required", path, n.name)
		}
	}
	tp, err := time.Parse(time.RFC3339Nano, f.PerihelionTT)
	if err != nil {
		return nil, flagError("orbit", "%s: field \"perihelion_tt\": want RFC 3339, got %q", path, f.PerihelionTT)
	}
	if (f.M1 == nil) != (f.K1 == nil) {
		return nil, flagError("orbit", "%s: give both \"m1\" and \"k1\" or neither", path)
	}
	o := &pb.OrbitElements{PerihelionDistanceAu: *f.QAU, Eccentricity: *f.E, InclinationDeg: *f.IncDeg,
		AscendingNodeDeg: *f.NodeDeg, PerihelionArgumentDeg: *f.PeriDeg, PerihelionTimeTt: timestamppb.New(tp)}
	if f.M1 != nil {
		o.MagnitudeLaw = &pb.OrbitElements_Comet{Comet: &pb.CometMagnitude{M1: *f.M1, K1: *f.K1}}
	}
	return &pb.Target{Name: filepath.Base(path), Position: &pb.Target_Orbit{Orbit: o}}, nil
}

// readElements loads a file of one-line orbital elements and returns the
// line whose designation is d (or the only line). A malformed line is
// reported with its line number and columns.
func readElements(path, d string) (*ephem.Conic, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, flagError("elements", "%v", err)
	}
	els, err := elements.Parse(string(data), false)
	if err != nil {
		return nil, flagError("elements", "%s: %v", path, strings.ReplaceAll(err.Error(), "elements: ", ""))
	}
	el, err := elements.Find(els, d)
	if err != nil {
		name := "designation"
		if d == "" {
			name = "elements"
		}
		return nil, flagError(name, "%s: %v", path, strings.TrimPrefix(err.Error(), "elements: "))
	}
	c, err := ephem.NewConic(el.Orbit)
	if err != nil {
		return nil, flagError("elements", "%s: line %d: %v", path, el.Line, strings.TrimPrefix(err.Error(), "ephem: "))
	}
	return c, nil
}

// skyBody is the JSON of the Sun or the Moon in `sky --json`.
type skyBody struct {
	RADeg        float64  `json:"ra_deg"`
	DecDeg       float64  `json:"dec_deg"`
	AltDeg       float64  `json:"alt_deg"`
	AzDeg        float64  `json:"az_deg"`
	Illumination *float64 `json:"illumination,omitempty"`
	DistanceKm   *float64 `json:"distance_km,omitempty"`
}

// skyTarget is the JSON of the target in `sky --json`.
type skyTarget struct {
	RADeg             float64  `json:"ra_deg"`
	DecDeg            float64  `json:"dec_deg"`
	AltDeg            float64  `json:"alt_deg"`
	AzDeg             float64  `json:"az_deg"`
	Airmass           *float64 `json:"airmass"`
	MoonSepDeg        float64  `json:"moon_sep_deg"`
	SunSepDeg         float64  `json:"sun_sep_deg"`
	AstrometricRADeg  *float64 `json:"astrometric_ra_deg,omitempty"`
	AstrometricDecDeg *float64 `json:"astrometric_dec_deg,omitempty"`
	DeltaAU           *float64 `json:"delta_au,omitempty"`
	RAU               *float64 `json:"r_au,omitempty"`
	Magnitude         *float64 `json:"magnitude,omitempty"`
	// Constellation is the IAU abbreviation of the constellation holding
	// the target's astrometric (ICRS) place, by the 1930 boundaries
	// referred to B1875 (package catalogue). Added by issue 19.
	Constellation string `json:"constellation"`
	// CatalogueID is the catalogue entry given by --name, else omitted.
	CatalogueID string `json:"catalogue_id,omitempty"`
}

// skyResult is the `nightloom sky --json` contract (field names fixed by
// issue 2; do not rename).
type skyResult struct {
	Time   string     `json:"time"`
	Sun    skyBody    `json:"sun"`
	Moon   skyBody    `json:"moon"`
	Target *skyTarget `json:"target,omitempty"`
}

func ptr(x float64) *float64 { return &x }

func deg(rad float64) float64 { return rad * ephem.Rad2Deg }

// computeSky evaluates the sky contract for one site and instant.
// orbit is any moving body: a conic, a planet or the Moon.
func computeSky(o *ephem.Observer, at time.Time, star *ephem.Star, orbit ephem.Mover) skyResult {
	snap := ephem.Prepare(ephem.NewInstant(at))
	l := snap.Local(o)
	sun, moon := l.SunPlace(), l.MoonPlace()
	illum, _ := l.MoonIllumination()
	r := skyResult{Time: at.UTC().Format(time.RFC3339Nano)}
	r.Sun = skyBody{RADeg: deg(sun.RA), DecDeg: deg(sun.Dec), AltDeg: deg(sun.AltApparent), AzDeg: deg(sun.Az)}
	r.Moon = skyBody{RADeg: deg(moon.RA), DecDeg: deg(moon.Dec), AltDeg: deg(moon.AltApparent), AzDeg: deg(moon.Az),
		Illumination: ptr(illum), DistanceKm: ptr(l.MoonOfDate().Norm())}
	var p ephem.Place
	var t skyTarget
	switch {
	case star != nil:
		u := star.Direction(snap.TT)
		p = l.StarPlace(u)
		t.Constellation = catalogue.Default().ConstellationOfVec(u).Abbr
	case orbit != nil:
		var geo ephem.View
		p, _, geo = l.OrbitPlace(orbit)
		t.Constellation = catalogue.Default().ConstellationOfVec(geo.Astrometric).Abbr
		ra, dec, _ := ephem.VecToSpherical(geo.Astrometric)
		t.AstrometricRADeg, t.AstrometricDecDeg = ptr(deg(ra)), ptr(deg(dec))
		t.DeltaAU, t.RAU = ptr(geo.DeltaAU), ptr(geo.RAU)
		if !math.IsNaN(geo.Magnitude) {
			t.Magnitude = ptr(geo.Magnitude)
		}
	default:
		return r
	}
	t.RADeg, t.DecDeg, t.AltDeg, t.AzDeg = deg(p.RA), deg(p.Dec), deg(p.AltApparent), deg(p.Az)
	if am := p.Airmass(); !math.IsInf(am, 0) {
		t.Airmass = ptr(am)
	}
	t.MoonSepDeg = deg(ephem.Separation(p.OfDate, moon.OfDate))
	t.SunSepDeg = deg(ephem.Separation(p.OfDate, sun.OfDate))
	r.Target = &t
	return r
}

func runSky(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("sky", stderr)
	site := fs.String("site", "", "site as LAT,LON[,ELEV_M]: degrees (east positive) and metres")
	at := fs.String("at", "", "instant, RFC 3339 (e.g. 2026-12-24T03:00:00Z)")
	ra := fs.String("ra", "", "fixed target right ascension, ICRS degrees")
	dec := fs.String("dec", "", "fixed target declination, ICRS degrees")
	orbitPath := fs.String("orbit", "", "orbit target: JSON file with q_au, e, i_deg, node_deg, peri_deg, perihelion_tt, m1, k1")
	name := fs.String("name", "", "fixed target from the bundled catalogue (M 31, NGC 224, Vega), instead of --ra/--dec")
	body := fs.String("body", "", "a planet or the Moon as target: "+strings.Join(ephem.BodyNames(), ", "))
	elementsPath := fs.String("elements", "", "orbit target from a file of one-line orbital elements (comet or minor-planet format)")
	designation := fs.String("designation", "", "with --elements: the line whose designation is this (default: the only line)")
	pressure := fs.Float64("pressure-hpa", 1010, "air pressure for refraction, hPa (0 = geometric altitudes)")
	temp := fs.Float64("temperature-c", 10, "air temperature for refraction, C")
	asJSON := fs.Bool("json", false, "print one JSON object")
	chart := fs.String("chart", "", "also draw the target's altitude over the night containing --at to this .png or .svg file")
	tz := fs.String("tz", "", "IANA time zone of the chart's time axis (default: local mean solar time)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	o, err := parseSite("site", *site)
	if err != nil {
		return err
	}
	if *chart != "" {
		if err := checkChartName("chart", *chart); err != nil {
			return err
		}
	}
	if err := o.SetAir(*pressure, *temp); err != nil {
		if errors.Is(err, ephem.ErrPressure) {
			return flagError("pressure-hpa", "must be within [0, 1200]")
		}
		return flagError("temperature-c", "must be within [-90, 60]")
	}
	if *at == "" {
		return flagError("at", "required, an RFC 3339 instant")
	}
	when, err := time.Parse(time.RFC3339Nano, *at)
	if err != nil {
		return flagError("at", "want RFC 3339 (e.g. 2026-12-24T03:00:00Z), got %q", *at)
	}
	if when.Year() < 1800 || when.Year() > 2200 {
		return flagError("at", "year %d outside 1800-2200, where the series are valid", when.Year())
	}
	var star *ephem.Star
	var orbit ephem.Mover
	var catID string
	if *name != "" {
		if *ra != "" || *dec != "" || *orbitPath != "" || *body != "" || *elementsPath != "" {
			return flagError("name", "give one of --name, --ra/--dec, --orbit, --body or --elements")
		}
		res, err := resolveFlag(catalogue.Default(), "name", *name)
		if err != nil {
			return err
		}
		catID = res.Entry.ID
		fmt.Fprintf(stderr, "%q is %s\n", *name, res.Entry.Label())
		*ra, *dec = strconv.FormatFloat(res.Entry.RADeg, 'f', -1, 64), strconv.FormatFloat(res.Entry.DecDeg, 'f', -1, 64)
	}
	targets := 0
	for _, f := range []string{*ra + *dec, *orbitPath, *body, *elementsPath} {
		if f != "" {
			targets++
		}
	}
	if *designation != "" && *elementsPath == "" {
		return flagError("designation", "needs --elements")
	}
	switch {
	case targets > 1:
		return flagError("body", "give one target: --ra/--dec, --orbit, --body or --elements")
	case (*ra == "") != (*dec == ""):
		if *ra == "" {
			return flagError("ra", "required with --dec")
		}
		return flagError("dec", "required with --ra")
	case *ra != "" && *orbitPath != "":
		return flagError("orbit", "give either --ra/--dec or --orbit, not both")
	case *ra != "":
		a, err1 := strconv.ParseFloat(*ra, 64)
		if err1 != nil || !(a >= 0 && a < 360) {
			return flagError("ra", "want degrees in [0, 360), got %q", *ra)
		}
		d, err2 := strconv.ParseFloat(*dec, 64)
		if err2 != nil || !(d >= -90 && d <= 90) {
			return flagError("dec", "want degrees in [-90, 90], got %q", *dec)
		}
		s, err := ephem.NewStar(a, d, 0, 0)
		if err != nil {
			return flagError("ra", "%v", err)
		}
		star = &s
	case *orbitPath != "":
		c, st, err := readOrbit(*orbitPath)
		if err != nil {
			return err
		}
		if c != nil {
			orbit = c // a nil *Conic must not become a non-nil Mover
		}
		star = st
	case *body != "":
		b, err := ephem.ParseBody(*body)
		if err != nil {
			return flagError("body", "unknown body %q; want one of %s", *body, strings.Join(ephem.BodyNames(), ", "))
		}
		if orbit, err = ephem.NewBody(b); err != nil {
			return flagError("body", "%v", err)
		}
	case *elementsPath != "":
		c, err := readElements(*elementsPath, *designation)
		if err != nil {
			return err
		}
		orbit = c
	}
	r := computeSky(&o, when, star, orbit)
	if r.Target != nil {
		r.Target.CatalogueID = catID
	}
	if *chart != "" {
		label := *orbitPath
		if *body != "" {
			label = *body
		} else if *elementsPath != "" {
			label = *elementsPath
		}
		if err := chartSky(*chart, *tz, &o, when, star, orbit, *ra, *dec, label); err != nil {
			return err
		}
		fmt.Fprintf(stderr, "wrote %s\n", *chart)
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		return enc.Encode(r)
	}
	return printSky(stdout, r)
}

func printSky(w io.Writer, r skyResult) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "time\t%s\n\n", r.Time)
	fmt.Fprintln(tw, "body\tRA (deg)\tDec (deg)\talt (deg)\taz (deg)\tnotes")
	fmt.Fprintf(tw, "Sun\t%.5f\t%+.5f\t%+.4f\t%.4f\t\n", r.Sun.RADeg, r.Sun.DecDeg, r.Sun.AltDeg, r.Sun.AzDeg)
	fmt.Fprintf(tw, "Moon\t%.5f\t%+.5f\t%+.4f\t%.4f\tillumination %.3f, distance %.0f km\n", r.Moon.RADeg, r.Moon.DecDeg,
		r.Moon.AltDeg, r.Moon.AzDeg, *r.Moon.Illumination, *r.Moon.DistanceKm)
	if t := r.Target; t != nil {
		notes := fmt.Sprintf("Moon %.1f deg, Sun %.1f deg", t.MoonSepDeg, t.SunSepDeg)
		if t.Airmass != nil {
			notes = fmt.Sprintf("airmass %.3f, ", *t.Airmass) + notes
		} else {
			notes = "below horizon, " + notes
		}
		if t.DeltaAU != nil {
			notes += fmt.Sprintf(", delta %.5f AU, r %.5f AU", *t.DeltaAU, *t.RAU)
		}
		if t.Magnitude != nil {
			notes += fmt.Sprintf(", mag %.2f (above the atmosphere, no extinction)", *t.Magnitude)
		}
		if t.Constellation != "" {
			notes += ", in " + t.Constellation
		}
		fmt.Fprintf(tw, "target\t%.5f\t%+.5f\t%+.4f\t%.4f\t%s\n", t.RADeg, t.DecDeg, t.AltDeg, t.AzDeg, notes)
	}
	fmt.Fprintln(tw, "\nRA/Dec: apparent topocentric, true equator and equinox of date; alt includes refraction unless --pressure-hpa 0.")
	return tw.Flush()
}

// nightResult is the `nightloom night --json` contract (field names fixed
// by issue 2; do not rename). Times are RFC 3339 UTC with seconds; null where
// the event does not happen in the window.
type nightResult struct {
	Sunset           *string `json:"sunset"`
	Sunrise          *string `json:"sunrise"`
	CivilDusk        *string `json:"civil_dusk"`
	CivilDawn        *string `json:"civil_dawn"`
	NauticalDusk     *string `json:"nautical_dusk"`
	NauticalDawn     *string `json:"nautical_dawn"`
	AstronomicalDusk *string `json:"astronomical_dusk"`
	AstronomicalDawn *string `json:"astronomical_dawn"`
	Moonrise         *string `json:"moonrise"`
	Moonset          *string `json:"moonset"`
}

func nightJSON(n *ephem.Night) nightResult {
	f := func(k ephem.EventKind) *string {
		t, ok := n.Get(k)
		if !ok {
			return nil
		}
		s := t.Round(time.Second).UTC().Format(time.RFC3339)
		return &s
	}
	return nightResult{f(ephem.Sunset), f(ephem.Sunrise), f(ephem.CivilDusk), f(ephem.CivilDawn),
		f(ephem.NauticalDusk), f(ephem.NauticalDawn), f(ephem.AstronomicalDusk), f(ephem.AstronomicalDawn),
		f(ephem.Moonrise), f(ephem.Moonset)}
}

func runNight(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("night", stderr)
	site := fs.String("site", "", "site as LAT,LON[,ELEV_M]: degrees (east positive) and metres")
	date := fs.String("date", "", "civil date YYYY-MM-DD; the night runs from local mean-solar noon to the next noon")
	tz := fs.String("tz", "", "IANA time zone for the local-time column of the table (default: local mean solar time)")
	asJSON := fs.Bool("json", false, "print one JSON object")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	o, err := parseSite("site", *site)
	if err != nil {
		return err
	}
	if *date == "" {
		return flagError("date", "required, as YYYY-MM-DD")
	}
	d, err := time.Parse("2006-01-02", *date)
	if err != nil {
		return flagError("date", "want YYYY-MM-DD, got %q", *date)
	}
	if d.Year() < 1800 || d.Year() > 2200 {
		return flagError("date", "year %d outside 1800-2200, where the series are valid", d.Year())
	}
	loc := time.FixedZone("LMT", int(math.Round(o.LonRad*ephem.Rad2Deg/15*3600)))
	if *tz != "" {
		if loc, err = time.LoadLocation(*tz); err != nil {
			return flagError("tz", "unknown time zone %q", *tz)
		}
	}
	n := ephem.NightOf(&o, d.Year(), d.Month(), d.Day())
	if *asJSON {
		return json.NewEncoder(stdout).Encode(nightJSON(&n))
	}
	fmt.Fprintf(stdout, "night of %s (from local mean-solar noon %s to the next noon, UTC)\n\n", *date, n.Start.Format("2006-01-02 15:04"))
	order := []ephem.EventKind{ephem.Sunset, ephem.CivilDusk, ephem.NauticalDusk, ephem.AstronomicalDusk,
		ephem.AstronomicalDawn, ephem.NauticalDawn, ephem.CivilDawn, ephem.Sunrise, ephem.Moonrise, ephem.Moonset}
	var evs []nightEvent
	for _, k := range order {
		t, ok := n.Get(k)
		evs = append(evs, nightEvent{name: eventWords[k], t: t, ok: ok})
	}
	return printEvents(stdout, loc, evs, localMidnight(d.Year(), d.Month(), d.Day(), loc))
}
