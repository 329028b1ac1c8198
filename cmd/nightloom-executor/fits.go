package main

// A small FITS header editor: the executor adds its own keywords to the
// primary header of each frame the camera sends. Rules from "Definition of
// the Flexible Image Transport System (FITS), version 4.0" (IAU FITS Working
// Group, 2016): a header is a sequence of 80-character ASCII keyword records
// (cards) ending with END, padded with spaces to a multiple of 2880 bytes
// (sect. 3.3, 4.1); fixed-format values (sect. 4.2): a string starts with a
// quote in column 11, quotes inside doubled, the closing quote at column 20
// or later; a number or logical is right-justified to column 30; a comment
// follows " / ".

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

const (
	fitsCard  = 80
	fitsBlock = 2880
)

var errFITS = errors.New("fits: not a FITS primary header")

// card is one keyword record to set: Value is a string, float64, int or
// bool.
type card struct {
	Key     string
	Value   any
	Comment string
}

// format renders a card as 80 characters.
func (c card) format() (string, error) {
	if len(c.Key) == 0 || len(c.Key) > 8 || strings.IndexFunc(c.Key, func(r rune) bool {
		return !(r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_')
	}) >= 0 {
		return "", fmt.Errorf("fits: bad keyword %q", c.Key)
	}
	var v string
	switch x := c.Value.(type) {
	case string:
		if strings.IndexFunc(x, func(r rune) bool { return r < 32 || r > 126 }) >= 0 {
			return "", fmt.Errorf("fits: %s: value has characters outside printable ASCII", c.Key)
		}
		s := strings.ReplaceAll(x, "'", "''")
		if len(s) < 8 {
			s += strings.Repeat(" ", 8-len(s))
		}
		v = "'" + s + "'"
		if len(v) > 70 {
			return "", fmt.Errorf("fits: %s: string too long for one card", c.Key)
		}
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return "", fmt.Errorf("fits: %s: value %v is not a finite number", c.Key, x)
		}
		// The shortest text that reads back as the same float64 when it
		// fits the fixed-format field (20 characters), else 15 digits.
		s := strconv.FormatFloat(x, 'G', -1, 64)
		if len(s) > 20 {
			s = strconv.FormatFloat(x, 'G', 15, 64)
		}
		if !strings.ContainsAny(s, ".E") {
			s += "."
		}
		v = fmt.Sprintf("%20s", s)
	case int:
		v = fmt.Sprintf("%20d", x)
	case bool:
		v = fmt.Sprintf("%20s", map[bool]string{true: "T", false: "F"}[x])
	default:
		return "", fmt.Errorf("fits: %s: unsupported value type %T", c.Key, c.Value)
	}
	s := fmt.Sprintf("%-8s= %s", c.Key, v)
	if c.Comment != "" && len(s)+3 < fitsCard {
		s += " / " + c.Comment
	}
	if len(s) > fitsCard {
		s = s[:fitsCard]
	}
	return s + strings.Repeat(" ", fitsCard-len(s)), nil
}

// editHeader returns the FITS file data with the cards set in its primary
// header: an existing keyword's card is replaced in place, a new one is
// inserted before END. The header is padded again to whole 2880-byte
// blocks; the data units that follow are copied unchanged.
func editHeader(data []byte, cards []card) ([]byte, error) {
	if len(data) < fitsBlock || len(data)%fitsBlock != 0 || !bytes.HasPrefix(data, []byte("SIMPLE  =")) {
		return nil, errFITS
	}
	var recs []string
	end := -1
	for off := 0; off+fitsCard <= len(data); off += fitsCard {
		r := string(data[off : off+fitsCard])
		if strings.TrimRight(r, " ") == "END" {
			end = off + fitsCard
			break
		}
		recs = append(recs, r)
	}
	if end < 0 {
		return nil, fmt.Errorf("%w: no END card", errFITS)
	}
	headerLen := (end + fitsBlock - 1) / fitsBlock * fitsBlock
	for _, c := range cards {
		s, err := c.format()
		if err != nil {
			return nil, err
		}
		replaced := false
		for i, r := range recs {
			if strings.TrimRight(r[:8], " ") == c.Key && r[8:10] == "= " {
				recs[i], replaced = s, true
				break
			}
		}
		if !replaced {
			recs = append(recs, s)
		}
	}
	var out bytes.Buffer
	for _, r := range recs {
		out.WriteString(r)
	}
	out.WriteString("END" + strings.Repeat(" ", fitsCard-3))
	if pad := out.Len() % fitsBlock; pad != 0 {
		out.WriteString(strings.Repeat(" ", fitsBlock-pad))
	}
	out.Write(data[headerLen:])
	return out.Bytes(), nil
}

// headerValue returns the raw value field of a keyword in the primary
// header (quotes removed for strings), for tests and recovery.
func headerValue(data []byte, key string) (string, bool) {
	for off := 0; off+fitsCard <= len(data); off += fitsCard {
		r := string(data[off : off+fitsCard])
		k := strings.TrimRight(r[:8], " ")
		if k == "END" {
			return "", false
		}
		if k != key || r[8:10] != "= " {
			continue
		}
		v := strings.TrimSpace(r[10:])
		if strings.HasPrefix(v, "'") {
			// A string: up to the closing quote that is not doubled.
			var b strings.Builder
			for i := 1; i < len(v); i++ {
				if v[i] == '\'' {
					if i+1 < len(v) && v[i+1] == '\'' {
						b.WriteByte('\'')
						i++
						continue
					}
					break
				}
				b.WriteByte(v[i])
			}
			return strings.TrimRight(b.String(), " "), true
		}
		if i := strings.Index(v, "/"); i >= 0 {
			v = v[:i]
		}
		return strings.TrimSpace(v), true
	}
	return "", false
}
