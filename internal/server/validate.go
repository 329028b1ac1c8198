package server

import (
	"math"
	"strconv"
	"time"
	"unicode/utf8"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Request validation: every limit that the .proto comments state is checked
// here, before anything is read or written. Each check records a field
// violation whose path follows the proto field names; ranges are written so
// that NaN fails every one of them (no NaN or infinity reaches the store).

// idx appends "[i]" to a path.
func idx(path string, i int) string { return path + "[" + strconv.Itoa(i) + "]" }

// rangeCheck requires lo <= x <= hi (which NaN fails).
func rangeCheck(v *violations, path string, x, lo, hi float64) {
	if !(x >= lo && x <= hi) {
		v.add(path, "must be within [%v, %v], got %v", lo, hi, x)
	}
}

// halfOpen requires lo <= x < hi.
func halfOpen(v *violations, path string, x, lo, hi float64) {
	if !(x >= lo && x < hi) {
		v.add(path, "must be within [%v, %v), got %v", lo, hi, x)
	}
}

// positiveUpTo requires 0 < x <= hi.
func positiveUpTo(v *violations, path string, x, hi float64) {
	if !(x > 0 && x <= hi) {
		v.add(path, "must be within (0, %v], got %v", hi, x)
	}
}

// intRange requires lo <= x <= hi.
func intRange(v *violations, path string, x, lo, hi int64) {
	if x < lo || x > hi {
		v.add(path, "must be within [%d, %d], got %d", lo, hi, x)
	}
}

// text checks a UTF-8 string of min..max bytes.
func text(v *violations, path, s string, minBytes, maxBytes int) {
	switch {
	case !utf8.ValidString(s):
		v.add(path, "must be valid UTF-8")
	case len(s) < minBytes && minBytes == 1:
		v.add(path, "is required")
	case len(s) < minBytes || len(s) > maxBytes:
		v.add(path, "must be %d..%d bytes, got %d", minBytes, maxBytes, len(s))
	}
}

// printableASCII checks a client-chosen key of min..max bytes of printable
// ASCII (0x21..0x7e; no spaces).
func printableASCII(v *violations, path, s string, minBytes, maxBytes int) {
	if len(s) < minBytes {
		if minBytes == 1 {
			v.add(path, "is required")
		} else {
			v.add(path, "must be at least %d bytes", minBytes)
		}
		return
	}
	if len(s) > maxBytes {
		v.add(path, "must be at most %d bytes, got %d", maxBytes, len(s))
		return
	}
	for i := 0; i < len(s); i++ {
		if s[i] < 0x21 || s[i] > 0x7e {
			v.add(path, "must be printable ASCII without spaces (byte %d is 0x%02x)", i, s[i])
			return
		}
	}
}

// requiredID checks a server-assigned id given in a request.
func requiredID(v *violations, path, id string) {
	switch {
	case id == "":
		v.add(path, "is required")
	case len(id) > MaxIDBytes:
		v.add(path, "must be at most %d bytes", MaxIDBytes)
	case !utf8.ValidString(id):
		v.add(path, "must be valid UTF-8")
	}
}

// optionalID checks an id that may be empty.
func optionalID(v *violations, path, id string) {
	if id != "" {
		requiredID(v, path, id)
	}
}

// Instants accepted anywhere in the API: the years 1900..2200, which the
// ephemeris models cover and the store can hold.
var (
	minInstant = time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC)
	maxInstant = time.Date(2201, 1, 1, 0, 0, 0, 0, time.UTC)
)

// instant checks a Timestamp; a nil one is "is required" when required and
// the zero time otherwise.
func instant(v *violations, path string, ts *timestamppb.Timestamp, required bool) time.Time {
	if ts == nil {
		if required {
			v.add(path, "is required")
		}
		return time.Time{}
	}
	if err := ts.CheckValid(); err != nil {
		v.add(path, "is not a valid timestamp")
		return time.Time{}
	}
	t := ts.AsTime()
	if t.Before(minInstant) || !t.Before(maxInstant) {
		v.add(path, "must be within the years 1900..2200, got %s", t.Format(time.RFC3339))
		return time.Time{}
	}
	return t
}

// duration checks a Duration within [lo, hi]; nil gives def (and "is
// required" when required).
func duration(v *violations, path string, d *durationpb.Duration, lo, hi, def time.Duration, required bool) time.Duration {
	if d == nil {
		if required {
			v.add(path, "is required")
		}
		return def
	}
	if err := d.CheckValid(); err != nil {
		v.add(path, "is not a valid duration")
		return def
	}
	x := d.AsDuration()
	if x < lo || x > hi {
		v.add(path, "must be within [%v, %v], got %v", lo, hi, x)
		return def
	}
	return x
}

// positiveDuration checks 0 < d <= hi.
func positiveDuration(v *violations, path string, d *durationpb.Duration, hi time.Duration) time.Duration {
	if d == nil {
		v.add(path, "is required")
		return 0
	}
	if err := d.CheckValid(); err != nil {
		v.add(path, "is not a valid duration")
		return 0
	}
	x := d.AsDuration()
	if x <= 0 || x > hi {
		v.add(path, "must be within (0, %v], got %v", hi, x)
		return 0
	}
	return x
}

// interval checks a required TimeInterval whose length is within
// [minLen, maxLen] (maxLen 0: no limit).
func interval(v *violations, path string, ti *nightloomv1.TimeInterval, minLen, maxLen time.Duration) (time.Time, time.Time, bool) {
	if ti == nil {
		v.add(path, "is required")
		return time.Time{}, time.Time{}, false
	}
	n := len(v.list)
	start := instant(v, path+".start", ti.GetStart(), true)
	end := instant(v, path+".end", ti.GetEnd(), true)
	if len(v.list) > n {
		return start, end, false
	}
	if !end.After(start) {
		v.add(path+".end", "must be after start")
		return start, end, false
	}
	l := end.Sub(start)
	if l < minLen || (maxLen > 0 && l > maxLen) {
		if maxLen > 0 {
			v.add(path, "length must be within [%v, %v], got %v", minLen, maxLen, l)
		} else {
			v.add(path, "length must be at least %v, got %v", minLen, l)
		}
		return start, end, false
	}
	return start, end, true
}

// localDate checks a LocalDate (year 1900..2200, valid day of month); a nil
// date is "is required" when required.
func localDate(v *violations, path string, d *nightloomv1.LocalDate, required bool) (civil time.Time, ok bool) {
	if d == nil {
		if required {
			v.add(path, "is required")
		}
		return time.Time{}, false
	}
	n := len(v.list)
	intRange(v, path+".year", int64(d.GetYear()), 1900, 2200)
	intRange(v, path+".month", int64(d.GetMonth()), 1, 12)
	if len(v.list) > n {
		return time.Time{}, false
	}
	last := time.Date(int(d.GetYear()), time.Month(d.GetMonth())+1, 0, 0, 0, 0, 0, time.UTC).Day()
	if d.GetDay() < 1 || int(d.GetDay()) > last {
		v.add(path+".day", "must be within [1, %d] for %04d-%02d, got %d", last, d.GetYear(), d.GetMonth(), d.GetDay())
		return time.Time{}, false
	}
	return time.Date(int(d.GetYear()), time.Month(d.GetMonth()), int(d.GetDay()), 0, 0, 0, 0, time.UTC), true
}

// dateOf returns the LocalDate of a civil date.
func dateOf(t time.Time) *nightloomv1.LocalDate {
	y, m, d := t.Date()
	return &nightloomv1.LocalDate{Year: int32(y), Month: int32(m), Day: int32(d)}
}

// civilOf turns a valid LocalDate into midnight UTC of that date.
func civilOf(d *nightloomv1.LocalDate) time.Time {
	return time.Date(int(d.GetYear()), time.Month(d.GetMonth()), int(d.GetDay()), 0, 0, 0, 0, time.UTC)
}

// pageSize checks a page size 0..max and returns the size to use.
func pageSize(v *violations, path string, size int32, def, max int) int {
	if size < 0 || int(size) > max {
		v.add(path, "must be within [0, %d], got %d", max, size)
		return def
	}
	if size == 0 {
		return def
	}
	return int(size)
}

// pageToken checks the length of a page token (its content is checked by
// the store, which refuses a token from another list).
func pageToken(v *violations, path, tok string) {
	if len(tok) > MaxPageTokenBytes {
		v.add(path, "must be at most %d bytes", MaxPageTokenBytes)
	}
}

// enumKnown requires an enum value that the API defines.
func enumKnown(v *violations, path string, x int32, names map[int32]string, allowUnspecified bool) {
	if _, ok := names[x]; !ok {
		v.add(path, "unknown value %d", x)
		return
	}
	if x == 0 && !allowUnspecified {
		v.add(path, "is required")
	}
}

// finite reports whether every value is a finite number.
func finite(xs ...float64) bool {
	for _, x := range xs {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// closures checks a list of closures (at most max).
func closures(v *violations, path string, cs []*nightloomv1.Closure, max int) {
	if len(cs) > max {
		v.add(path, "at most %d closures, got %d", max, len(cs))
		return
	}
	for i, c := range cs {
		p := idx(path, i)
		if c == nil {
			v.add(p, "is required")
			continue
		}
		interval(v, p+".interval", c.GetInterval(), time.Nanosecond, 0)
		text(v, p+".reason", c.GetReason(), 0, MaxReasonBytes)
	}
}
