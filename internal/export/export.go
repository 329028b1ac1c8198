// Package export renders a stored plan for other tools: CSV (RFC 4180) for
// spreadsheets and iCalendar (RFC 5545) for calendars, one row or one event
// per run. It converts only; it computes nothing about the sky.
package export

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"strconv"
	"strings"
	"time"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// CSVHeader is the header row of CSV (export.proto lists the columns).
var CSVHeader = []string{"run", "block_id", "target", "filter", "frames", "exposure_s", "start_local", "end_local",
	"start_utc", "end_utc", "alt_start_deg", "alt_end_deg", "airmass", "moon_separation_deg", "notes"}

// CSV renders the plan's runs, in start order, with local times in loc.
func CSV(p *nightloomv1.Plan, loc *time.Location) ([]byte, error) {
	var b bytes.Buffer
	w := csv.NewWriter(&b)
	w.UseCRLF = true // RFC 4180
	if err := w.Write(CSVHeader); err != nil {
		return nil, err
	}
	f := func(x float64) string { return strconv.FormatFloat(x, 'f', 2, 64) }
	for i, a := range p.GetAssignments() {
		start, end := a.GetStart().AsTime(), a.GetEnd().AsTime()
		row := []string{strconv.Itoa(i + 1), a.GetBlockId(), a.GetTargetName(), a.GetFilter(), strconv.Itoa(int(a.GetFrames())),
			strconv.FormatFloat(a.GetExposure().AsDuration().Seconds(), 'f', -1, 64),
			start.In(loc).Format(time.RFC3339), end.In(loc).Format(time.RFC3339),
			start.UTC().Format(time.RFC3339), end.UTC().Format(time.RFC3339),
			f(a.GetConditionsAtStart().GetAltitudeDeg()), f(a.GetConditionsAtEnd().GetAltitudeDeg()),
			f(max(a.GetConditionsAtStart().GetAirmass(), a.GetConditionsAtEnd().GetAirmass())),
			f(min(a.GetConditionsAtStart().GetMoonSeparationDeg(), a.GetConditionsAtEnd().GetMoonSeparationDeg())),
			notes(a)}
		if err := w.Write(row); err != nil {
			return nil, err
		}
	}
	w.Flush()
	return b.Bytes(), w.Error()
}

func notes(a *nightloomv1.Assignment) string {
	var n []string
	if a.GetCadenceRun() > 0 {
		n = append(n, fmt.Sprintf("cadence run %d", a.GetCadenceRun()))
	}
	if a.GetNonSiderealTracking() {
		n = append(n, "non-sidereal tracking")
	}
	return strings.Join(n, "; ")
}

// ICalendar renders the plan's runs as an RFC 5545 calendar: one VEVENT per
// run with a UID stable across exports of the same plan version, DTSTAMP
// the plan's creation, DTSTART/DTEND in UTC, CRLF line ends and lines
// folded at 75 octets (RFC 5545 section 3.1). siteName goes into LOCATION.
func ICalendar(p *nightloomv1.Plan, siteName string, loc *time.Location) []byte {
	var b bytes.Buffer
	line := func(s string) { fold(&b, s) }
	const stamp = "20060102T150405Z"
	line("BEGIN:VCALENDAR")
	line("VERSION:2.0")
	line("PRODID:-//nightloom//plan export//EN")
	line("CALSCALE:GREGORIAN")
	line("X-WR-CALNAME:" + escapeText(fmt.Sprintf("nightloom %s, plan %s v%d", siteName, p.GetId(), p.GetVersion())))
	created := p.GetCreateTime().AsTime().UTC().Format(stamp)
	for i, a := range p.GetAssignments() {
		start, end := a.GetStart().AsTime(), a.GetEnd().AsTime()
		line("BEGIN:VEVENT")
		line(fmt.Sprintf("UID:%s-%d-%s@nightloom", p.GetId(), i+1, a.GetBlockId()))
		line("DTSTAMP:" + created)
		line("DTSTART:" + start.UTC().Format(stamp))
		line("DTEND:" + end.UTC().Format(stamp))
		line("SUMMARY:" + escapeText(fmt.Sprintf("%s %s x%d", a.GetTargetName(), a.GetFilter(), a.GetFrames())))
		line("LOCATION:" + escapeText(siteName))
		desc := fmt.Sprintf("run %d of plan %s version %d; block %s; %d x %s through %s; local %s-%s (%s); alt %.0f-%.0f deg, airmass %.2f",
			i+1, p.GetId(), p.GetVersion(), a.GetBlockId(), a.GetFrames(), a.GetExposure().AsDuration(), a.GetFilter(),
			start.In(loc).Format("15:04"), end.In(loc).Format("15:04"), loc.String(),
			a.GetConditionsAtStart().GetAltitudeDeg(), a.GetConditionsAtEnd().GetAltitudeDeg(),
			max(a.GetConditionsAtStart().GetAirmass(), a.GetConditionsAtEnd().GetAirmass()))
		if n := notes(a); n != "" {
			desc += "; " + n
		}
		line("DESCRIPTION:" + escapeText(desc))
		line("END:VEVENT")
	}
	line("END:VCALENDAR")
	return b.Bytes()
}

// escapeText escapes a TEXT value (RFC 5545 section 3.3.11).
func escapeText(s string) string {
	r := strings.NewReplacer(`\`, `\\`, ";", `\;`, ",", `\,`, "\r\n", `\n`, "\n", `\n`)
	return r.Replace(s)
}

// fold writes a content line, folded so that no line is longer than 75
// octets (continuation lines start with one space), never splitting a UTF-8
// sequence, and ends it with CRLF.
func fold(b *bytes.Buffer, s string) {
	limit := 75
	for len(s) > limit {
		cut := limit
		for cut > 0 && s[cut]&0xC0 == 0x80 { // do not split a UTF-8 sequence
			cut--
		}
		b.WriteString(s[:cut])
		b.WriteString("\r\n ")
		s = s[cut:]
		limit = 74 // the leading space counts
	}
	b.WriteString(s)
	b.WriteString("\r\n")
}
