package web

// Loading and shaping what each page shows. Records are read through the
// store and their bodies decoded the way the server decodes them (a stored
// spec or plan body is the API message; the record's id, version and times
// are authoritative).

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"html"
	"html/template"
	"math"
	"net/http"
	"regexp"
	"sort"
	"strings"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/chart"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Decoding of stored records (as internal/server does).

func siteFromRecord(rec store.Site) (*nightloomv1.Site, error) {
	s := &nightloomv1.Site{}
	if err := proto.Unmarshal(rec.Spec, s); err != nil {
		return nil, fmt.Errorf("web: site %s: %w", rec.ID, err)
	}
	s.Id = rec.ID
	return s, nil
}

func targetFromRecord(rec store.Target) (*nightloomv1.Target, error) {
	t := &nightloomv1.Target{}
	if err := proto.Unmarshal(rec.Spec, t); err != nil {
		return nil, fmt.Errorf("web: target %s: %w", rec.ID, err)
	}
	t.Id = rec.ID
	return t, nil
}

func blockFromRecord(rec store.Block) (*nightloomv1.Block, error) {
	b := &nightloomv1.Block{}
	if err := proto.Unmarshal(rec.Spec, b); err != nil {
		return nil, fmt.Errorf("web: block %s: %w", rec.ID, err)
	}
	b.Id, b.SiteId, b.TargetId = rec.ID, rec.SiteID, rec.TargetID
	b.FramesWanted, b.FramesDone = int32(rec.FramesWanted), int32(rec.FramesDone)
	return b, nil
}

func planFromRecord(rec store.Plan) (*nightloomv1.Plan, error) {
	p := &nightloomv1.Plan{}
	if err := proto.Unmarshal(rec.Body, p); err != nil {
		return nil, fmt.Errorf("web: plan %s: %w", rec.ID, err)
	}
	p.Id, p.SiteId, p.Version = rec.ID, rec.SiteID, rec.Version
	p.CreateTime = timestamppb.New(rec.CreatedAt)
	return p, nil
}

// Templates.

var templateFuncs = template.FuncMap{}

// pages maps a page name to its template file; each is parsed with the
// layout.
var pages = []string{"signin", "sites", "night", "block", "error"}

func parseTemplates() (map[string]*template.Template, error) {
	out := map[string]*template.Template{}
	for _, p := range pages {
		t, err := template.New(p).Funcs(templateFuncs).ParseFS(templateFS, "templates/layout.html", "templates/"+p+".html")
		if err != nil {
			return nil, fmt.Errorf("web: template %s: %w", p, err)
		}
		out[p] = t
	}
	return out, nil
}

// pageBase is what every page's layout needs.
type pageBase struct {
	Title    string
	SignedIn bool
	Role     string
	CSRF     string // the sign-out form's
	// Live is the event stream and Fragment the part to refetch, for live
	// pages ("" otherwise).
	Live, Fragment string
}

func (h *Handler) base(r *http.Request, title string) pageBase {
	b := pageBase{Title: title}
	if x := sessionFrom(r.Context()); x != nil {
		b.SignedIn, b.Role, b.CSRF = true, string(x.role), x.csrf
	}
	return b
}

// render executes a page; with ?fragment=1 only its "content" template.
func (h *Handler) render(w http.ResponseWriter, r *http.Request, code int, page string, data any) {
	name := "layout"
	if r.URL.Query().Get("fragment") != "" {
		name = "content"
	}
	var buf bytes.Buffer
	if err := h.tmpl[page].ExecuteTemplate(&buf, name, data); err != nil {
		h.log.Error("web template failed", "page", page, "err", err.Error())
		http.Error(w, "internal error", http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	if w.Header().Get("Cache-Control") == "" {
		w.Header().Set("Cache-Control", "no-store")
	}
	w.WriteHeader(code)
	_, _ = buf.WriteTo(w)
}

// fail shows an error page: 404 for what is not stored, 503 otherwise.
func (h *Handler) fail(w http.ResponseWriter, r *http.Request, what string, err error) {
	code, msg := http.StatusServiceUnavailable, what+" could not be read; try again."
	if errors.Is(err, store.ErrNotFound) {
		code, msg = http.StatusNotFound, what+" not found."
	} else {
		h.log.Error("web page failed", "what", what, "err", err.Error())
	}
	h.render(w, r, code, "error", struct {
		pageBase
		Message string
	}{h.base(r, "Not available"), msg})
}

// Sites list.

type siteRow struct {
	ID, Name, TimeZone, LocalNow, Tonight string
	Public                                bool
}

func (h *Handler) sitesPage(w http.ResponseWriter, r *http.Request) {
	var rows []siteRow
	tok := ""
	for {
		recs, next, err := h.cfg.Store.ListSites(r.Context(), store.Page{Size: store.MaxPageSize, Token: tok})
		if err != nil {
			h.fail(w, r, "The sites", err)
			return
		}
		for _, rec := range recs {
			s, err := siteFromRecord(rec)
			if err != nil {
				h.fail(w, r, "The sites", err)
				return
			}
			loc := siteLocation(s)
			rows = append(rows, siteRow{ID: s.GetId(), Name: s.GetName(), TimeZone: loc.String(),
				LocalNow: h.now().In(loc).Format("Mon 2 Jan 15:04 MST"), Tonight: dateString(nightOf(h.now(), loc)),
				Public: s.GetId() == h.cfg.PublicSite})
		}
		if next == "" {
			break
		}
		tok = next
	}
	h.render(w, r, http.StatusOK, "sites", struct {
		pageBase
		Sites []siteRow
	}{h.base(r, "Sites"), rows})
}

// Dates and times.

func siteLocation(s *nightloomv1.Site) *time.Location {
	if loc, err := time.LoadLocation(s.GetTimeZone()); err == nil {
		return loc
	}
	return time.UTC
}

// nightOf is the date of the night that contains now at the site: before
// local noon it is still the night that began the day before.
func nightOf(now time.Time, loc *time.Location) time.Time {
	lt := now.In(loc)
	d := time.Date(lt.Year(), lt.Month(), lt.Day(), 0, 0, 0, 0, loc)
	if lt.Hour() < 12 {
		d = d.AddDate(0, 0, -1)
	}
	return d
}

func dateString(d time.Time) string { return d.Format("2006-01-02") }

func localDate(d time.Time) *nightloomv1.LocalDate {
	return &nightloomv1.LocalDate{Year: int32(d.Year()), Month: int32(d.Month()), Day: int32(d.Day())}
}

func fmtDur(d time.Duration) string {
	d = d.Round(time.Second)
	switch {
	case d >= time.Hour:
		return fmt.Sprintf("%dh%02dm", int(d.Hours()), int(d.Minutes())%60)
	case d >= time.Minute:
		if s := int(d.Seconds()) % 60; s != 0 {
			return fmt.Sprintf("%dm%02ds", int(d.Minutes()), s)
		}
		return fmt.Sprintf("%dm", int(d.Minutes()))
	default:
		return fmt.Sprintf("%ds", int(d.Seconds()))
	}
}

// enumText turns "REASON_MOON_ILLUMINATION" into "moon illumination".
func enumText(s, prefix string) string {
	return strings.ReplaceAll(strings.ToLower(strings.TrimPrefix(s, prefix)), "_", " ")
}

// The night page.

type runRow struct {
	N                                 int
	BlockID, Target, Filter, Exposure string
	Frames                            int32
	Prep, Start, End, UTC             string
	StartRFC, EndRFC                  string
	Alt, Airmass, Moon, Notes         string
	Now, Past                         bool
	Done, Wanted                      int32
	Percent                           int
	CadenceRun                        int32
	PrepareRFC                        string
}

type unplacedRow struct {
	BlockID, Target, Filter, Reason, Detail string
	FramesLeft                              int32
}

type spanRow struct{ From, To, Text string }

type eventRow struct{ Name, Local, UTC string }

type versionRow struct {
	Version                      int64
	ID, Created, Origin, Changes string
	Runs, Unplaced               int
	Current                      bool
}

type nextRun struct {
	Target, Filter, Start, StartRFC, In string
}

type nightView struct {
	pageBase
	SiteID, SiteName, TimeZone string
	Date, Prev, Next, Tonight  string
	IsTonight                  bool
	Now, NowRFC                string
	Chart                      template.HTML
	Events                     []eventRow
	MoonIllum                  string
	Plan                       *nightloomv1.Plan
	PlanOrigin, PlanCreated    string
	Rows                       []runRow
	Current                    *runRow
	NextRun                    *nextRun
	Closures                   []spanRow
	Unplaced                   []unplacedRow
	History                    []versionRow
	Summary                    string
	Warnings                   []string
}

// maxNights bounds ?date= around today (a year each way).
const maxNights = 366

func (h *Handler) nightPage(w http.ResponseWriter, r *http.Request) {
	ctx := r.Context()
	rec, err := h.cfg.Store.GetSite(ctx, r.PathValue("site"))
	if err != nil {
		h.fail(w, r, "The site", err)
		return
	}
	site, err := siteFromRecord(rec)
	if err != nil {
		h.fail(w, r, "The site", err)
		return
	}
	loc := siteLocation(site)
	tonight := nightOf(h.now(), loc)
	date := tonight
	if q := r.URL.Query().Get("date"); q != "" {
		d, err := time.ParseInLocation("2006-01-02", q, loc)
		if err != nil || math.Abs(d.Sub(tonight).Hours()/24) > maxNights {
			h.render(w, r, http.StatusBadRequest, "error", struct {
				pageBase
				Message string
			}{h.base(r, "Bad date"), "The date must be YYYY-MM-DD within a year of today."})
			return
		}
		date = d
	}
	v, err := h.night(ctx, site, loc, date)
	if err != nil {
		h.fail(w, r, "The night", err)
		return
	}
	v.pageBase = h.base(r, site.GetName()+", night of "+v.Date)
	q := ""
	if r.URL.Query().Get("date") != "" {
		q = "date=" + v.Date + "&"
	}
	v.Live = "/sites/" + site.GetId() + "/events"
	v.Fragment = "/sites/" + site.GetId() + "?" + q + "fragment=1"
	v.IsTonight = v.Date == dateString(tonight)
	v.Tonight = dateString(tonight)
	h.render(w, r, http.StatusOK, "night", v)
}

// night gathers a site's night.
func (h *Handler) night(ctx context.Context, site *nightloomv1.Site, loc *time.Location, date time.Time) (*nightView, error) {
	now := h.now()
	v := &nightView{SiteID: site.GetId(), SiteName: site.GetName(), TimeZone: loc.String(), Date: dateString(date),
		Prev: dateString(date.AddDate(0, 0, -1)), Next: dateString(date.AddDate(0, 0, 1)),
		Now: now.In(loc).Format("15:04 MST"), NowRFC: now.UTC().Format(time.RFC3339)}
	local := func(t time.Time) string { return t.In(loc).Format("15:04") }

	// The window: local noon to noon; the Sun and Moon from SkyService.Night.
	from := time.Date(date.Year(), date.Month(), date.Day(), 12, 0, 0, 0, loc)
	to := from.AddDate(0, 0, 1)
	var chartFrom, chartTo time.Time
	nr, err := h.cfg.Sky.Night(ctx, &nightloomv1.NightRequest{SiteId: site.GetId(), Date: localDate(date)})
	if err != nil {
		v.Warnings = append(v.Warnings, "Sun and Moon events unavailable.")
	} else {
		if w := nr.GetWindow(); w != nil {
			from, to = w.GetStart().AsTime(), w.GetEnd().AsTime()
		}
		for _, e := range []struct {
			name string
			t    *timestamppb.Timestamp
		}{
			{"sunset", nr.GetSunset()}, {"civil dusk", nr.GetCivilDusk()}, {"nautical dusk", nr.GetNauticalDusk()},
			{"astronomical dusk", nr.GetAstronomicalDusk()}, {"astronomical dawn", nr.GetAstronomicalDawn()},
			{"nautical dawn", nr.GetNauticalDawn()}, {"civil dawn", nr.GetCivilDawn()}, {"sunrise", nr.GetSunrise()},
			{"moonrise", nr.GetMoonrise()}, {"moonset", nr.GetMoonset()},
		} {
			if e.t != nil {
				v.Events = append(v.Events, eventRow{e.name, local(e.t.AsTime()), e.t.AsTime().UTC().Format("15:04")})
			}
		}
		sort.SliceStable(v.Events, func(i, j int) bool { return eventTime(nr, v.Events[i].Name).Before(eventTime(nr, v.Events[j].Name)) })
		v.MoonIllum = fmt.Sprintf("%.0f %%", 100*nr.GetMoonIllumination())
		if pi := nr.GetPlanningInterval(); pi != nil {
			chartFrom, chartTo = pi.GetStart().AsTime(), pi.GetEnd().AsTime()
		}
	}

	plans, err := h.nightPlans(ctx, site.GetId(), from, to)
	if err != nil {
		return nil, err
	}
	blocks := map[string]*nightloomv1.Block{}
	names := map[string]string{} // target id -> name
	if len(plans) > 0 {
		p := plans[len(plans)-1]
		v.Plan = p
		v.PlanOrigin = enumText(p.GetOrigin().String(), "PLAN_ORIGIN_")
		v.PlanCreated = p.GetCreateTime().AsTime().In(loc).Format("2006-01-02 15:04 MST")
		if err := h.siteBlocks(ctx, site.GetId(), blocks); err != nil {
			return nil, err
		}
		var next *nightloomv1.Assignment
		for i, a := range p.GetAssignments() {
			st, en := a.GetStart().AsTime(), a.GetEnd().AsTime()
			names[a.GetTargetId()] = a.GetTargetName()
			row := runRow{N: i + 1, BlockID: a.GetBlockId(), Target: a.GetTargetName(), Filter: a.GetFilter(),
				Exposure: fmtDur(a.GetExposure().AsDuration()), Frames: a.GetFrames(),
				Prep: local(a.GetPrepareStart().AsTime()), Start: local(st), End: local(en),
				UTC:      st.UTC().Format("15:04") + "–" + en.UTC().Format("15:04"),
				StartRFC: st.UTC().Format(time.RFC3339), EndRFC: en.UTC().Format(time.RFC3339),
				PrepareRFC: a.GetPrepareStart().AsTime().UTC().Format(time.RFC3339),
				Now:        !now.Before(a.GetPrepareStart().AsTime()) && now.Before(en), Past: !now.Before(en),
				CadenceRun: a.GetCadenceRun()}
			c0, c1 := a.GetConditionsAtStart(), a.GetConditionsAtEnd()
			row.Alt = fmt.Sprintf("%.0f–%.0f", c0.GetAltitudeDeg(), c1.GetAltitudeDeg())
			row.Airmass = fmt.Sprintf("%.2f", math.Max(c0.GetAirmass(), c1.GetAirmass()))
			row.Moon = fmt.Sprintf("%.0f", math.Min(c0.GetMoonSeparationDeg(), c1.GetMoonSeparationDeg()))
			var notes []string
			if a.GetCadenceRun() > 0 {
				notes = append(notes, fmt.Sprintf("cadence run %d", a.GetCadenceRun()))
			}
			if a.GetNonSiderealTracking() {
				notes = append(notes, "non-sidereal")
			}
			row.Notes = strings.Join(notes, ", ")
			if b := blocks[a.GetBlockId()]; b != nil {
				row.Done, row.Wanted = b.GetFramesDone(), b.GetFramesWanted()
				if row.Wanted > 0 {
					row.Percent = int(100 * int64(row.Done) / int64(row.Wanted))
				}
			}
			v.Rows = append(v.Rows, row)
			if row.Now && v.Current == nil {
				v.Current = &v.Rows[len(v.Rows)-1]
			}
			if next == nil && st.After(now) && !row.Now {
				next = a
			}
		}
		if v.Current != nil {
			c := *v.Current
			v.Current = &c
		}
		if next != nil {
			st := next.GetStart().AsTime()
			v.NextRun = &nextRun{Target: next.GetTargetName(), Filter: next.GetFilter(), Start: local(st),
				StartRFC: st.UTC().Format(time.RFC3339), In: fmtDur(st.Sub(now).Truncate(time.Second))}
		}
		for _, c := range p.GetClosures() {
			reason := c.GetReason()
			if reason == "" {
				reason = "closed"
			}
			v.Closures = append(v.Closures, spanRow{local(c.GetInterval().GetStart().AsTime()), local(c.GetInterval().GetEnd().AsTime()), reason})
		}
		for _, u := range p.GetUnplaced() {
			row := unplacedRow{BlockID: u.GetBlockId(), Reason: enumText(u.GetReason().String(), "REASON_"), Detail: u.GetDetail(),
				FramesLeft: u.GetFramesLeft()}
			if b := blocks[u.GetBlockId()]; b != nil {
				row.Filter = b.GetFilter()
				row.Target = h.targetName(ctx, b.GetTargetId(), names)
			}
			v.Unplaced = append(v.Unplaced, row)
		}
		if o := p.GetObjective(); o != nil {
			v.Summary = fmt.Sprintf("exposure %s, overheads %s, idle %s", fmtDur(o.GetExposureTime().AsDuration()),
				fmtDur(o.GetOverheadTime().AsDuration()), fmtDur(o.GetIdleTime().AsDuration()))
		}
		v.History = history(plans, loc)
		if iv := p.GetInterval(); iv != nil {
			chartFrom, chartTo = iv.GetStart().AsTime(), iv.GetEnd().AsTime()
		}
	}
	if !chartFrom.IsZero() {
		svg, err := h.chartSVG(ctx, site, v.Plan, names, chartFrom.Add(-30*time.Minute), chartTo.Add(30*time.Minute))
		if err != nil {
			h.log.Warn("web chart failed", "site", site.GetId(), "err", err.Error())
			v.Warnings = append(v.Warnings, "The chart could not be drawn.")
		}
		v.Chart = svg
	}
	return v, nil
}

func eventTime(nr *nightloomv1.NightResponse, name string) time.Time {
	m := map[string]*timestamppb.Timestamp{"sunset": nr.GetSunset(), "civil dusk": nr.GetCivilDusk(),
		"nautical dusk": nr.GetNauticalDusk(), "astronomical dusk": nr.GetAstronomicalDusk(),
		"astronomical dawn": nr.GetAstronomicalDawn(), "nautical dawn": nr.GetNauticalDawn(),
		"civil dawn": nr.GetCivilDawn(), "sunrise": nr.GetSunrise(), "moonrise": nr.GetMoonrise(), "moonset": nr.GetMoonset()}
	return m[name].AsTime()
}

// nightPlans returns the plan versions of a site whose interval overlaps
// [from, to), oldest first, walking back from the newest version (at most
// maxPlanScan versions).
func (h *Handler) nightPlans(ctx context.Context, siteID string, from, to time.Time) ([]*nightloomv1.Plan, error) {
	recs, err := h.planRecords(ctx, siteID, func(rec store.Plan) bool { return rec.Start.Before(to) && rec.End.After(from) })
	if err != nil {
		return nil, err
	}
	var out []*nightloomv1.Plan
	for i := len(recs) - 1; i >= 0; i-- {
		p, err := planFromRecord(recs[i])
		if err != nil {
			return nil, err
		}
		out = append(out, p)
	}
	return out, nil
}

// planRecords walks the site's plan versions, newest first, and returns
// those keep accepts.
func (h *Handler) planRecords(ctx context.Context, siteID string, keep func(store.Plan) bool) ([]store.Plan, error) {
	latest, err := h.cfg.Store.LatestPlan(ctx, siteID)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	var out []store.Plan
	for v := latest.Version; v >= 1 && latest.Version-v < maxPlanScan; v-- {
		rec := latest
		if v != latest.Version {
			if rec, err = h.cfg.Store.PlanByVersion(ctx, siteID, v); errors.Is(err, store.ErrNotFound) {
				continue
			} else if err != nil {
				return nil, err
			}
		}
		if keep(rec) {
			out = append(out, rec)
		}
	}
	return out, nil
}

// siteBlocks loads every block of a site.
func (h *Handler) siteBlocks(ctx context.Context, siteID string, into map[string]*nightloomv1.Block) error {
	tok := ""
	for {
		recs, next, err := h.cfg.Store.ListBlocks(ctx, store.BlockFilter{SiteID: siteID}, store.Page{Size: store.MaxPageSize, Token: tok})
		if err != nil {
			return err
		}
		for _, rec := range recs {
			b, err := blockFromRecord(rec)
			if err != nil {
				return err
			}
			into[b.GetId()] = b
		}
		if next == "" {
			return nil
		}
		tok = next
	}
}

func (h *Handler) targetName(ctx context.Context, id string, cache map[string]string) string {
	if n, ok := cache[id]; ok {
		return n
	}
	n := id
	if rec, err := h.cfg.Store.GetTarget(ctx, id); err == nil {
		n = rec.Name
	}
	cache[id] = n
	return n
}

// history lists a night's versions, newest first, with what each replan
// changed against the version it replaced: of the runs from the replan
// instant on, how many were kept exactly (same block, start, end and
// frames), dropped and added.
func history(plans []*nightloomv1.Plan, loc *time.Location) []versionRow {
	byID := map[string]*nightloomv1.Plan{}
	for _, p := range plans {
		byID[p.GetId()] = p
	}
	var out []versionRow
	for i := len(plans) - 1; i >= 0; i-- {
		p := plans[i]
		row := versionRow{Version: p.GetVersion(), ID: p.GetId(), Origin: enumText(p.GetOrigin().String(), "PLAN_ORIGIN_"),
			Created: p.GetCreateTime().AsTime().In(loc).Format("01-02 15:04:05"), Runs: len(p.GetAssignments()),
			Unplaced: len(p.GetUnplaced()), Current: i == len(plans)-1}
		prev := byID[p.GetPreviousPlanId()]
		switch {
		case p.GetOrigin() == nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN && prev != nil && p.GetReplanFrom() != nil:
			from := p.GetReplanFrom().AsTime()
			key := func(a *nightloomv1.Assignment) string {
				return fmt.Sprintf("%s|%d|%d|%d", a.GetBlockId(), a.GetStart().AsTime().Unix(), a.GetEnd().AsTime().Unix(), a.GetFrames())
			}
			old := map[string]int{}
			for _, a := range prev.GetAssignments() {
				if !a.GetStart().AsTime().Before(from) {
					old[key(a)]++
				}
			}
			kept, added := 0, 0
			for _, a := range p.GetAssignments() {
				if a.GetStart().AsTime().Before(from) {
					continue
				}
				if old[key(a)] > 0 {
					old[key(a)]--
					kept++
				} else {
					added++
				}
			}
			dropped := 0
			for _, n := range old {
				dropped += n
			}
			row.Changes = fmt.Sprintf("replanned from %s: %s kept, %d dropped, %d new", from.In(loc).Format("15:04"),
				plural(kept, "run"), dropped, added)
			var cl []string
			for _, c := range p.GetClosures() {
				cl = append(cl, fmt.Sprintf("%s–%s %s", c.GetInterval().GetStart().AsTime().In(loc).Format("15:04"),
					c.GetInterval().GetEnd().AsTime().In(loc).Format("15:04"), c.GetReason()))
			}
			if len(cl) > 0 {
				row.Changes += "; closures " + strings.Join(cl, ", ")
			}
		case p.GetOrigin() == nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN:
			row.Changes = "replan of " + p.GetPreviousPlanId()
		default:
			row.Changes = fmt.Sprintf("made: %s, %s unplaced", plural(len(p.GetAssignments()), "run"), plural(len(p.GetUnplaced()), "block"))
		}
		out = append(out, row)
	}
	return out
}

// plural is "1 run", "2 runs".
func plural(n int, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}

var svgRoot = regexp.MustCompile(`^<svg width="[^"]*" height="[^"]*"`)

// chartSVG draws the night (the plan's runs over their targets' curves)
// with the dark theme, as an inline <svg> element.
func (h *Handler) chartSVG(ctx context.Context, site *nightloomv1.Site, p *nightloomv1.Plan, names map[string]string, from, to time.Time) (template.HTML, error) {
	cs, err := chart.SiteFromProto(site)
	if err != nil {
		return "", err
	}
	spec := chart.Spec{Site: cs, Start: from, End: to, Step: 4 * time.Minute, Theme: &chart.Dark}
	if p != nil {
		byTarget := map[string]int{}
		for _, a := range p.GetAssignments() {
			k, ok := byTarget[a.GetTargetId()]
			if !ok {
				rec, err := h.cfg.Store.GetTarget(ctx, a.GetTargetId())
				if err != nil {
					return "", err
				}
				tp, err := targetFromRecord(rec)
				if err != nil {
					return "", err
				}
				t, err := chart.TargetFromProto(tp)
				if err != nil {
					continue // a body target: no curve of its own here
				}
				k = len(spec.Curves)
				byTarget[a.GetTargetId()] = k
				spec.Curves = append(spec.Curves, chart.Curve{Name: tp.GetName(), Target: t})
			}
			spec.Curves[k].Runs = append(spec.Curves[k].Runs, chart.Run{Start: a.GetStart().AsTime(), End: a.GetEnd().AsTime(), Label: a.GetFilter()})
		}
		for _, c := range p.GetClosures() {
			reason := c.GetReason()
			if reason == "" {
				reason = "closed"
			}
			spec.Closures = append(spec.Closures, chart.Span{Start: c.GetInterval().GetStart().AsTime(), End: c.GetInterval().GetEnd().AsTime(), Label: reason})
		}
		if f := p.GetReplanFrom(); f != nil && p.GetOrigin() == nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN {
			spec.Marks = append(spec.Marks, chart.Span{Start: f.AsTime(), Label: "replanned from " + f.AsTime().In(cs.Location).Format("15:04")})
		}
	}
	if now := h.now(); now.After(from) && now.Before(to) {
		spec.Marks = append(spec.Marks, chart.Span{Start: now, Label: "now " + now.In(cs.Location).Format("15:04")})
	}
	var buf bytes.Buffer
	if err := chart.WriteSVG(&buf, spec); err != nil {
		return "", err
	}
	s := buf.String()
	i := strings.Index(s, "<svg")
	if i < 0 {
		return "", errors.New("web: chart has no <svg> element")
	}
	s = svgRoot.ReplaceAllString(s[i:], `<svg class="chart" role="img" aria-label="`+
		html.EscapeString("altitude of the planned targets over the night of "+site.GetName())+`"`)
	// The SVG canvas escapes every text it draws (vgsvg FillString uses
	// html.EscapeString); TestTemplatesEscape checks a target named with
	// markup.
	return template.HTML(s), nil
}

// The block page.

type blockRun struct {
	Night, Start, End, UTC string
	Version                int64
	Frames                 int32
	Past, Now              bool
}

type windowRow struct {
	From, To, MaxAlt, MinAirmass, Quality string
	Fits                                  bool
}

type blockView struct {
	pageBase
	Block                        *nightloomv1.Block
	SiteID, SiteName, TargetName string
	Exposure, State              string
	Percent                      int
	Runs                         []blockRun
	Night                        string
	Windows                      []windowRow
	Blocked                      []spanRow
	VisibleTime                  string
	Warnings                     []string
}

func (h *Handler) blockPage(w http.ResponseWriter, r *http.Request) {
	ctx := r.Context()
	rec, err := h.cfg.Store.GetBlock(ctx, r.PathValue("block"))
	if err != nil {
		h.fail(w, r, "The block", err)
		return
	}
	b, err := blockFromRecord(rec)
	if err != nil {
		h.fail(w, r, "The block", err)
		return
	}
	srec, err := h.cfg.Store.GetSite(ctx, rec.SiteID)
	if err != nil {
		h.fail(w, r, "The block's site", err)
		return
	}
	site, err := siteFromRecord(srec)
	if err != nil {
		h.fail(w, r, "The block's site", err)
		return
	}
	loc := siteLocation(site)
	now := h.now()
	v := &blockView{pageBase: h.base(r, "Block "+b.GetId()), Block: b, SiteID: site.GetId(), SiteName: site.GetName(),
		TargetName: h.targetName(ctx, rec.TargetID, map[string]string{}), Exposure: fmtDur(b.GetExposure().AsDuration()),
		State: strings.ToLower(rec.State)}
	if b.GetFramesWanted() > 0 {
		v.Percent = int(100 * int64(b.GetFramesDone()) / int64(b.GetFramesWanted()))
	}
	// Live like the night page: the site's events refetch this page.
	v.Live, v.Fragment = "/sites/"+site.GetId()+"/events", "/blocks/"+b.GetId()+"?fragment=1"
	// Runs over all nights: the newest version of each night's plan.
	recs, err := h.planRecords(ctx, site.GetId(), func(store.Plan) bool { return true })
	if err != nil {
		h.fail(w, r, "The plans", err)
		return
	}
	seen := map[string]bool{}
	for _, pr := range recs { // newest first
		p, err := planFromRecord(pr)
		if err != nil {
			h.fail(w, r, "The plans", err)
			return
		}
		night := dateString(nightOf(pr.Start, loc))
		if n := p.GetNight(); n != nil {
			night = fmt.Sprintf("%04d-%02d-%02d", n.GetYear(), n.GetMonth(), n.GetDay())
		}
		if seen[night] {
			continue
		}
		seen[night] = true
		for _, a := range p.GetAssignments() {
			if a.GetBlockId() != b.GetId() {
				continue
			}
			st, en := a.GetStart().AsTime(), a.GetEnd().AsTime()
			v.Runs = append(v.Runs, blockRun{Night: night, Version: p.GetVersion(), Frames: a.GetFrames(),
				Start: st.In(loc).Format("15:04"), End: en.In(loc).Format("15:04"),
				UTC: st.UTC().Format("15:04") + "–" + en.UTC().Format("15:04"), Past: !now.Before(en),
				Now: !now.Before(st) && now.Before(en)})
		}
	}
	sort.SliceStable(v.Runs, func(i, j int) bool {
		return v.Runs[i].Night < v.Runs[j].Night || v.Runs[i].Night == v.Runs[j].Night && v.Runs[i].Start < v.Runs[j].Start
	})
	// Visibility tonight, from SkyService.Visibility.
	tonight := nightOf(now, loc)
	v.Night = dateString(tonight)
	vr, err := h.cfg.Sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_BlockId{BlockId: b.GetId()},
		Span: &nightloomv1.VisibilityRequest_Night{Night: localDate(tonight)}})
	if err != nil {
		v.Warnings = append(v.Warnings, "Visibility tonight unavailable: "+visibilityError(err))
	} else {
		local := func(t *timestamppb.Timestamp) string { return t.AsTime().In(loc).Format("15:04") }
		for _, wi := range vr.GetWindows() {
			v.Windows = append(v.Windows, windowRow{From: local(wi.GetInterval().GetStart()), To: local(wi.GetInterval().GetEnd()),
				MaxAlt: fmt.Sprintf("%.0f°", wi.GetMaxAltitudeDeg()), MinAirmass: fmt.Sprintf("%.2f", wi.GetMinAirmass()),
				Quality: fmt.Sprintf("%.2f", wi.GetBestQuality()), Fits: wi.GetFitsShortestRun()})
		}
		for _, bs := range vr.GetBlocked() {
			v.Blocked = append(v.Blocked, spanRow{local(bs.GetInterval().GetStart()), local(bs.GetInterval().GetEnd()),
				enumText(bs.GetReason().String(), "REASON_")})
		}
		v.VisibleTime = fmtDur(vr.GetVisibleTime().AsDuration())
	}
	h.render(w, r, http.StatusOK, "block", v)
}

// visibilityError is a short, safe text for a failed Visibility call.
func visibilityError(err error) string {
	if errors.Is(err, store.ErrNotFound) {
		return "not found"
	}
	s := err.Error()
	if i := strings.LastIndex(s, "desc = "); i >= 0 {
		s = s[i+len("desc = "):]
	}
	if len(s) > 200 {
		s = s[:200]
	}
	return s
}
