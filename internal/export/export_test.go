package export

import (
	"bytes"
	"strings"
	"testing"
	"unicode/utf8"
)

// TestFold: RFC 5545 section 3.1: lines of at most 75 octets, CRLF, a
// continuation starts with one space, no UTF-8 sequence split, and
// unfolding gives the line back.
func TestFold(t *testing.T) {
	for _, line := range []string{
		"SUMMARY:short",
		"DESCRIPTION:" + strings.Repeat("abcdefghij", 20),
		"LOCATION:" + strings.Repeat("Colline aux Hiboux é", 9),
	} {
		var b bytes.Buffer
		fold(&b, line)
		out := b.String()
		if !strings.HasSuffix(out, "\r\n") {
			t.Fatalf("%q: no CRLF at the end", out)
		}
		parts := strings.Split(strings.TrimSuffix(out, "\r\n"), "\r\n")
		var un strings.Builder
		for i, p := range parts {
			if len(p) > 75 || !utf8.ValidString(p) {
				t.Errorf("physical line %q: %d octets or invalid UTF-8", p, len(p))
			}
			if i > 0 {
				if !strings.HasPrefix(p, " ") {
					t.Errorf("continuation %q lacks the leading space", p)
				}
				p = p[1:]
			}
			un.WriteString(p)
		}
		if un.String() != line {
			t.Errorf("unfolded %q, want %q", un.String(), line)
		}
	}
}

// TestEscapeText: RFC 5545 section 3.3.11.
func TestEscapeText(t *testing.T) {
	if got, want := escapeText("a,b;c\\d\ne"), `a\,b\;c\\d\ne`; got != want {
		t.Errorf("escapeText = %q, want %q", got, want)
	}
}
