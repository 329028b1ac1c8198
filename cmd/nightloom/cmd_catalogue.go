package main

// `nightloom catalogue ...`: the bundled catalogue, offline (the client
// embeds the same data as the daemon), and the name lookup that
// `target create --name` does through the daemon.

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/nightloom/nightloom/catalogue"
	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/server"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func catalogueCommands() []command {
	return []command{
		{name: "lookup", summary: "resolve a name (M 31, NGC 224, Vega, alpha Lyr) to one catalogue entry (offline)", run: runCatalogueLookup},
		{name: "search", summary: "entries by name, type, magnitude limit and constellation (offline)", run: runCatalogueSearch},
		{name: "tonight", summary: "what is well placed from a site on a night, ranked (offline)", run: runCatalogueTonight},
		{name: "finder", summary: "finder chart of an orbit target's track over several nights among the stars (offline)", run: runCatalogueFinder},
		{name: "constellation", summary: "the IAU constellation of an ICRS position (offline)", run: runCatalogueConstellation},
	}
}

// magFlag is an optional magnitude given on the command line.
type magFlag struct {
	v   float64
	set bool
}

func (m *magFlag) String() string {
	if !m.set {
		return ""
	}
	return strconv.FormatFloat(m.v, 'g', -1, 64)
}

func (m *magFlag) Set(s string) error {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < -30 || v > 30 {
		return fmt.Errorf("want a magnitude in [-30, 30], got %q", s)
	}
	m.v, m.set = v, true
	return nil
}

// printEntryJSON prints entries as the API's SearchCatalogueResponse in its
// protobuf JSON mapping.
func printEntryJSON(w io.Writer, c *catalogue.Catalogue, es []*catalogue.Entry) error {
	out := &pb.SearchCatalogueResponse{TotalMatches: int32(len(es))}
	for _, e := range es {
		out.Entries = append(out.Entries, server.CatalogueEntryProto(c, e))
	}
	return writeJSON(w, out)
}

func printEntries(w io.Writer, c *catalogue.Catalogue, es []*catalogue.Entry) error {
	tw := newTable(w)
	fmt.Fprintln(tw, "id\tname\ttype\tmag\tsize\tRA (ICRS)\tDec\tconstellation")
	for _, e := range es {
		mag := "-"
		if e.HasMag {
			mag = fmt.Sprintf("%.1f", e.Mag)
		}
		name := e.Name
		if e.Messier > 0 && !strings.HasPrefix(e.ID, "M ") {
			name = strings.TrimSpace(fmt.Sprintf("M %d %s", e.Messier, e.Name))
		}
		if d := e.BayerFlamsteed(); d != "" {
			name = strings.TrimSpace(name + " (" + d + ")")
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", e.ID, name, e.TypeWords(), mag, e.Size(), hms(e.RADeg), dms(e.DecDeg), e.Constellation)
	}
	if len(es) == 0 {
		fmt.Fprintln(tw, "(nothing matches)")
	}
	return tw.Flush()
}

// resolveFlag resolves a name for a flag, turning a refusal into a flag
// error that lists the candidates.
func resolveFlag(c *catalogue.Catalogue, flagName, name string) (catalogue.Resolution, error) {
	r, err := c.Resolve(name)
	if err != nil {
		return r, flagError(flagName, "%s", strings.TrimPrefix(err.Error(), "catalogue: "))
	}
	return r, nil
}

func runCatalogueLookup(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("catalogue lookup", stderr)
	name := fs.String("name", "", "the name: M 31, NGC 224, ngc0224, IC 434, Vega, alpha Lyr, HIP 91262; required")
	asJSON := fs.Bool("json", false, "print a LookupNameResponse as protobuf JSON")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if strings.TrimSpace(*name) == "" {
		return flagError("name", "required")
	}
	c := catalogue.Default()
	r, err := resolveFlag(c, "name", *name)
	if err != nil {
		return err
	}
	if *asJSON {
		return writeJSON(stdout, &pb.LookupNameResponse{Entry: server.CatalogueEntryProto(c, r.Entry), MatchedName: r.Matched})
	}
	fmt.Fprintf(stdout, "%q is %s (matched %q)\n", *name, r.Entry.Label(), r.Matched)
	return printEntries(stdout, c, []*catalogue.Entry{r.Entry})
}

func runCatalogueSearch(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("catalogue search", stderr)
	text := fs.String("text", "", "part of a name or designation (a full designation such as \"M 3\" matches exactly)")
	typ := fs.String("type", "", "galaxy, cluster, nebula, star, deep-sky, or a type (\"planetary nebula\", \"pn\", \"open cluster\")")
	var mag magFlag
	fs.Var(&mag, "mag-limit", "keep entries at least this bright (visual magnitude)")
	con := fs.String("constellation", "", "IAU constellation abbreviation or name (Ori, Orion)")
	limit := fs.Int("limit", 50, "at most this many entries (0: all)")
	asJSON := fs.Bool("json", false, "print a SearchCatalogueResponse as protobuf JSON")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *limit < 0 {
		return flagError("limit", "must be >= 0")
	}
	c := catalogue.Default()
	es, err := c.Search(catalogue.Query{Text: *text, Type: *typ, Constellation: *con, MagLimit: mag.v, HasMagLimit: mag.set})
	if err != nil {
		return queryFlagError(err)
	}
	total := len(es)
	if *limit > 0 && len(es) > *limit {
		es = es[:*limit]
	}
	if *asJSON {
		return printEntryJSON(stdout, c, es)
	}
	if err := printEntries(stdout, c, es); err != nil {
		return err
	}
	if total > len(es) {
		fmt.Fprintf(stdout, "%d of %d matches shown (--limit)\n", len(es), total)
	}
	return nil
}

// queryFlagError names the flag a catalogue query error is about.
func queryFlagError(err error) error {
	msg := strings.TrimPrefix(err.Error(), "catalogue: bad query: ")
	for _, f := range []string{"constellation", "type", "magnitude", "altitude", "darkness", "step"} {
		if strings.HasPrefix(msg, f) {
			name := map[string]string{"magnitude": "mag-limit", "altitude": "min-alt"}[f]
			if name == "" {
				name = f
			}
			return flagError(name, "%s", msg)
		}
	}
	return err
}

// tonightJSON is the `catalogue tonight --json` output.
type tonightJSON struct {
	Night     string        `json:"night"`
	DarkStart *string       `json:"dark_start"`
	DarkEnd   *string       `json:"dark_end"`
	DarkHours float64       `json:"dark_hours"`
	Objects   []tonightItem `json:"objects"`
}

type tonightItem struct {
	ID            string   `json:"id"`
	Label         string   `json:"label"`
	Type          string   `json:"type"`
	Magnitude     *float64 `json:"magnitude"`
	Constellation string   `json:"constellation"`
	Score         float64  `json:"score"`
	Hours         float64  `json:"hours"`
	MaxAltDeg     float64  `json:"max_alt_deg"`
	Best          string   `json:"best"`
}

func runCatalogueTonight(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("catalogue tonight", stderr)
	site := fs.String("site", "", "site as LAT,LON[,ELEV_M]: degrees (east positive) and metres; required")
	date := fs.String("date", "", "civil date the night begins, YYYY-MM-DD; required")
	minAlt := fs.Float64("min-alt", 30, "lowest useful altitude, deg (geometric)")
	var mag magFlag
	mag.v, mag.set = 8, true
	fs.Var(&mag, "mag-limit", "keep objects at least this bright (visual magnitude)")
	dark := fs.String("darkness", "astronomical", "darkness required: astronomical (Sun below -18 deg), nautical (-12) or civil (-6)")
	typ := fs.String("type", "deep-sky", "deep-sky, galaxy, cluster, nebula, star, or a type")
	con := fs.String("constellation", "", "IAU constellation abbreviation or name")
	limit := fs.Int("limit", 25, "at most this many objects (0: all)")
	tz := fs.String("tz", "", "IANA time zone for the times shown (default UTC)")
	asJSON := fs.Bool("json", false, "print JSON")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	o, err := parseSite("site", *site)
	if err != nil {
		return err
	}
	day, err := time.Parse("2006-01-02", *date)
	if *date == "" || err != nil {
		return flagError("date", "want YYYY-MM-DD, got %q", *date)
	}
	if day.Year() < 1800 || day.Year() > 2200 {
		return flagError("date", "year %d outside 1800-2200", day.Year())
	}
	sunAlt, ok := map[string]float64{"astronomical": ephem.AstronomicalAltDeg, "nautical": ephem.NauticalAltDeg, "civil": ephem.CivilAltDeg}[*dark]
	if !ok {
		return flagError("darkness", "want astronomical, nautical or civil, got %q", *dark)
	}
	if !(*minAlt > 0 && *minAlt < 90) {
		return flagError("min-alt", "must be within (0, 90) deg")
	}
	if *limit < 0 {
		return flagError("limit", "must be >= 0")
	}
	loc := time.UTC
	if *tz != "" {
		if loc, err = time.LoadLocation(*tz); err != nil {
			return flagError("tz", "unknown time zone %q", *tz)
		}
	}
	c := catalogue.Default()
	res, err := c.Tonight(catalogue.TonightQuery{Observer: &o, Year: day.Year(), Month: day.Month(), Day: day.Day(),
		SunAltDeg: sunAlt, MinAltDeg: *minAlt, MagLimit: mag.v, Type: *typ, Constellation: *con, Limit: *limit})
	if err != nil {
		return queryFlagError(err)
	}
	if *asJSON {
		out := tonightJSON{Night: *date, DarkHours: res.DarkHours, Objects: []tonightItem{}}
		if res.DarkHours > 0 {
			s, e := res.DarkStart.UTC().Format(time.RFC3339), res.DarkEnd.UTC().Format(time.RFC3339)
			out.DarkStart, out.DarkEnd = &s, &e
		}
		for _, ob := range res.Objects {
			it := tonightItem{ID: ob.Entry.ID, Label: ob.Entry.Label(), Type: ob.Entry.TypeWords(), Constellation: ob.Entry.Constellation,
				Score: round3(ob.Score), Hours: round3(ob.Hours), MaxAltDeg: round3(ob.MaxAltDeg), Best: ob.Best.UTC().Format(time.RFC3339)}
			if ob.Entry.HasMag {
				it.Magnitude = ptr(ob.Entry.Mag)
			}
			out.Objects = append(out.Objects, it)
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	if res.DarkHours == 0 {
		fmt.Fprintf(stdout, "no %s darkness on the night of %s at this site\n", *dark, *date)
		return nil
	}
	fmt.Fprintf(stdout, "night of %s: %s dark %s to %s (%.1f h; times %s); objects above %g deg, mag <= %g\n",
		*date, *dark, res.DarkStart.In(loc).Format("15:04"), res.DarkEnd.In(loc).Format("15:04"), res.DarkHours, loc, *minAlt, mag.v)
	tw := newTable(stdout)
	fmt.Fprintln(tw, "#\tscore\tobject\ttype\tmag\tcon\tup h\tmax alt\tat")
	for i, ob := range res.Objects {
		m := "-"
		if ob.Entry.HasMag {
			m = fmt.Sprintf("%.1f", ob.Entry.Mag)
		}
		fmt.Fprintf(tw, "%d\t%.3f\t%s\t%s\t%s\t%s\t%.1f\t%.0f\t%s\n", i+1, ob.Score, ob.Entry.Label(), ob.Entry.TypeWords(), m,
			ob.Entry.Constellation, ob.Hours, ob.MaxAltDeg, ob.Best.In(loc).Format("15:04"))
	}
	if len(res.Objects) == 0 {
		fmt.Fprintln(tw, "(nothing)")
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(stdout, "score = (hours above the altitude floor in the dark / dark hours) x sin(highest dark altitude); 1 is the zenith all night")
	return nil
}

func round3(x float64) float64 { return math.Round(x*1000) / 1000 }

func runCatalogueConstellation(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("catalogue constellation", stderr)
	ra := fs.String("ra", "", "ICRS right ascension, deg [0, 360); required")
	dec := fs.String("dec", "", "ICRS declination, deg [-90, 90]; required")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	a, err := strconv.ParseFloat(*ra, 64)
	if err != nil || !(a >= 0 && a < 360) {
		return flagError("ra", "want degrees in [0, 360), got %q", *ra)
	}
	d, err := strconv.ParseFloat(*dec, 64)
	if err != nil || !(d >= -90 && d <= 90) {
		return flagError("dec", "want degrees in [-90, 90], got %q", *dec)
	}
	c := catalogue.Default()
	k := c.ConstellationOf(a, d)
	ra75, dec75 := catalogue.ToB1875(ephem.SphericalToVec(a*ephem.Deg2Rad, d*ephem.Deg2Rad))
	fmt.Fprintf(stdout, "%s (%s); B1875.0 place %.4f %+.4f deg\n", k.Name, k.Abbr, ra75, dec75)
	return nil
}

// lookupForCreate asks the daemon to resolve a name for `target create
// --name` and returns the request to create a fixed target there.
func lookupForCreate(a *api, name string, stderr io.Writer) (*pb.CreateTargetRequest, error) {
	ctx, cancel := a.ctx()
	defer cancel()
	r, err := pb.NewCatalogueServiceClient(a.cc).LookupName(ctx, &pb.LookupNameRequest{Name: name})
	if err != nil {
		if c := status.Code(err); c == codes.NotFound || c == codes.FailedPrecondition {
			return nil, flagError("name", "%s", status.Convert(err).Message())
		}
		return nil, a.callErr("LookupName", err)
	}
	e := r.GetEntry()
	mag := ""
	if e.Magnitude != nil {
		mag = fmt.Sprintf(", mag %.1f", e.GetMagnitude())
	}
	fmt.Fprintf(stderr, "%q is %s: %s%s in %s (catalogue entry %s)\n", name, e.GetLabel(), e.GetTypeWords(), mag, e.GetConstellationName(), e.GetId())
	return &pb.CreateTargetRequest{Target: &pb.Target{Name: name, Position: &pb.Target_Fixed{Fixed: &pb.FixedPosition{
		RaDeg: e.GetRaDeg(), DecDeg: e.GetDecDeg(), CatalogueId: e.GetId()}}}}, nil
}

// pointingConstellation is the IAU constellation (abbreviation) of a
// pointing's astrometric ICRS place, for the plan's notes; "" without one.
func pointingConstellation(p *pb.Pointing) string {
	if p == nil {
		return ""
	}
	return catalogue.Default().ConstellationOf(p.GetRaIcrsDeg(), p.GetDecIcrsDeg()).Abbr
}
