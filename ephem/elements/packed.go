package elements

import (
	"fmt"
	"strconv"
	"strings"
	"time"
)

// Packed forms used by the one-line orbital element formats (from the
// formats' public description): numbers, provisional designations and
// dates are squeezed into fixed widths with letters standing for digit
// groups.

// base62 is the digit alphabet of the packed forms: 0-9, A-Z (10-35),
// a-z (36-61).
const base62 = "0123456789ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz"

func digit62(c byte) (int, bool) {
	i := strings.IndexByte(base62, c)
	return i, i >= 0
}

// centuryLetter maps the first character of packed years and dates to the
// century: I = 1800s, J = 1900s, K = 2000s (A..L cover 1000..2199).
func centuryOf(c byte) (int, bool) {
	if c < 'A' || c > 'L' {
		return 0, false
	}
	return 10 + int(c-'A'), true
}

func centuryLetter(cent int) (byte, bool) {
	if cent < 10 || cent > 21 {
		return 0, false
	}
	return byte('A' + cent - 10), true
}

// PackNumber packs a minor-planet number into five characters: 00001 ..
// 99999 as digits, 100000 .. 619999 with a letter for the ten-thousands
// (A0000 = 100000, z9999 = 619999), and from 620000 a tilde and four
// base-62 digits (~0000 = 620000).
func PackNumber(n int) (string, error) {
	switch {
	case n < 1:
		return "", fmt.Errorf("elements: minor-planet number %d must be positive", n)
	case n < 100000:
		return fmt.Sprintf("%05d", n), nil
	case n < 620000:
		return string(base62[n/10000]) + fmt.Sprintf("%04d", n%10000), nil
	case n < 620000+62*62*62*62:
		m := n - 620000
		b := []byte("~0000")
		for i := 4; i >= 1; i-- {
			b[i] = base62[m%62]
			m /= 62
		}
		return string(b), nil
	}
	return "", fmt.Errorf("elements: minor-planet number %d is too large to pack", n)
}

// UnpackNumber is the inverse of PackNumber.
func UnpackNumber(s string) (int, error) {
	if len(s) != 5 {
		return 0, fmt.Errorf("elements: packed number %q must have 5 characters", s)
	}
	if s[0] == '~' {
		n := 0
		for i := 1; i < 5; i++ {
			d, ok := digit62(s[i])
			if !ok {
				return 0, fmt.Errorf("elements: packed number %q: bad character %q", s, s[i])
			}
			n = n*62 + d
		}
		return 620000 + n, nil
	}
	hi, ok := digit62(s[0])
	if !ok {
		return 0, fmt.Errorf("elements: packed number %q: bad first character", s)
	}
	lo, err := strconv.Atoi(s[1:])
	if err != nil || strings.ContainsAny(s[1:], "+- ") {
		return 0, fmt.Errorf("elements: packed number %q: last four must be digits", s)
	}
	n := hi*10000 + lo
	if n < 1 {
		return 0, fmt.Errorf("elements: packed number %q is zero", s)
	}
	return n, nil
}

// PackProvisional packs a minor planet's provisional designation such as
// "1998 SQ108" into seven characters ("J98SA8Q"): century letter, two
// digits of the year, the half-month letter, the cycle count in two
// characters (00-99, then A0 = 100 ... z9 = 619) and the second letter.
func PackProvisional(d string) (string, error) {
	year, half, second, cycle, err := splitProvisional(d)
	if err != nil {
		return "", err
	}
	c, ok := centuryLetter(year / 100)
	if !ok {
		return "", fmt.Errorf("elements: provisional designation %q: year out of range", d)
	}
	if cycle > 619 {
		return "", fmt.Errorf("elements: provisional designation %q: cycle count above 619", d)
	}
	return fmt.Sprintf("%c%02d%c%c%d%c", c, year%100, half, base62[cycle/10], cycle%10, second), nil
}

// splitProvisional reads "YYYY HLn" (H half-month letter A-Y without I, L
// second letter, n optional cycle count).
func splitProvisional(d string) (year int, half, second byte, cycle int, err error) {
	bad := func() (int, byte, byte, int, error) {
		return 0, 0, 0, 0, fmt.Errorf("elements: %q is not a provisional designation like 1998 SQ108", d)
	}
	if len(d) < 7 || d[4] != ' ' {
		return bad()
	}
	year, err = strconv.Atoi(d[:4])
	if err != nil || year < 1000 {
		return bad()
	}
	half, second = d[5], d[6]
	if half < 'A' || half > 'Y' || half == 'I' || second < 'A' || second > 'Z' {
		return bad()
	}
	if len(d) > 7 {
		cycle, err = strconv.Atoi(d[7:])
		if err != nil || cycle < 0 || strings.ContainsAny(d[7:], "+- ") {
			return bad()
		}
	}
	return year, half, second, cycle, nil
}

// UnpackProvisional is the inverse of PackProvisional.
func UnpackProvisional(p string) (string, error) {
	if len(p) != 7 {
		return "", fmt.Errorf("elements: packed provisional designation %q must have 7 characters", p)
	}
	cent, ok := centuryOf(p[0])
	yy, err := strconv.Atoi(p[1:3])
	hi, ok2 := digit62(p[4])
	if !ok || err != nil || !ok2 || p[5] < '0' || p[5] > '9' || p[3] < 'A' || p[3] > 'Y' || p[6] < 'A' || p[6] > 'Z' ||
		strings.ContainsAny(p[1:3], "+- ") {
		return "", fmt.Errorf("elements: %q is not a packed provisional designation", p)
	}
	cycle := hi*10 + int(p[5]-'0')
	s := fmt.Sprintf("%d %c%c", cent*100+yy, p[3], p[6])
	if cycle > 0 {
		s += strconv.Itoa(cycle)
	}
	return s, nil
}

// PackCometProvisional packs a comet's provisional designation without its
// prefix, "2031 X1" or a fragment "2031 X1-B", into seven characters:
// century letter, two digits of the year, half-month letter, the order in
// two characters (as the cycle count of PackProvisional) and the fragment
// letter in lower case, or "0" for none ("K31X010", "K31X01b").
func PackCometProvisional(d string) (string, error) {
	bad := fmt.Errorf("elements: %q is not a comet designation like 2031 X1 or 2031 X1-B", d)
	frag := byte('0')
	if i := strings.IndexByte(d, '-'); i >= 0 {
		if len(d) != i+2 || d[i+1] < 'A' || d[i+1] > 'Z' {
			return "", bad
		}
		frag = d[i+1] - 'A' + 'a'
		d = d[:i]
	}
	if len(d) < 7 || d[4] != ' ' {
		return "", bad
	}
	year, err := strconv.Atoi(d[:4])
	half := d[5]
	order, err2 := strconv.Atoi(d[6:])
	c, ok := centuryLetter(year / 100)
	if err != nil || err2 != nil || !ok || half < 'A' || half > 'Y' || half == 'I' || order < 1 || order > 619 ||
		strings.ContainsAny(d[6:], "+- ") {
		return "", bad
	}
	return fmt.Sprintf("%c%02d%c%c%d%c", c, year%100, half, base62[order/10], order%10, frag), nil
}

// UnpackCometProvisional is the inverse of PackCometProvisional.
func UnpackCometProvisional(p string) (string, error) {
	if len(p) != 7 {
		return "", fmt.Errorf("elements: packed comet designation %q must have 7 characters", p)
	}
	cent, ok := centuryOf(p[0])
	yy, err := strconv.Atoi(p[1:3])
	hi, ok2 := digit62(p[4])
	frag := p[6]
	if !ok || err != nil || !ok2 || p[5] < '0' || p[5] > '9' || p[3] < 'A' || p[3] > 'Y' ||
		!(frag == '0' || frag >= 'a' && frag <= 'z') || strings.ContainsAny(p[1:3], "+- ") {
		return "", fmt.Errorf("elements: %q is not a packed comet designation", p)
	}
	order := hi*10 + int(p[5]-'0')
	if order < 1 {
		return "", fmt.Errorf("elements: packed comet designation %q has order 0", p)
	}
	s := fmt.Sprintf("%d %c%d", cent*100+yy, p[3], order)
	if frag != '0' {
		s += "-" + string(frag-'a'+'A')
	}
	return s, nil
}

// PackDate packs a calendar date (0h TT; the time of day is ignored) into
// five characters: century letter, two digits of the year, the month and
// the day as base-62 digits (1-9, then A = 10 ... V = 31): 2031-10-17 ->
// "K31AH".
func PackDate(t time.Time) (string, error) {
	c, ok := centuryLetter(t.Year() / 100)
	if !ok {
		return "", fmt.Errorf("elements: year %d cannot be packed", t.Year())
	}
	return fmt.Sprintf("%c%02d%c%c", c, t.Year()%100, base62[int(t.Month())], base62[t.Day()]), nil
}

// UnpackDate is the inverse of PackDate: the date at 0h (a TT clock
// reading in the formats, returned in a time.Time labelled UTC).
func UnpackDate(p string) (time.Time, error) {
	bad := fmt.Errorf("elements: %q is not a packed date like K31AH", p)
	if len(p) != 5 {
		return time.Time{}, bad
	}
	cent, ok := centuryOf(p[0])
	yy, err := strconv.Atoi(p[1:3])
	m, ok2 := digit62(p[3])
	d, ok3 := digit62(p[4])
	if !ok || err != nil || !ok2 || !ok3 || m < 1 || m > 12 || d < 1 || d > 31 || strings.ContainsAny(p[1:3], "+- ") {
		return time.Time{}, bad
	}
	t := time.Date(cent*100+yy, time.Month(m), d, 0, 0, 0, 0, time.UTC)
	if t.Day() != d {
		return time.Time{}, fmt.Errorf("elements: packed date %q: no day %d in that month", p, d)
	}
	return t, nil
}
