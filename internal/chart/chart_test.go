package chart

import (
	"bytes"
	"encoding/xml"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// testSpec is a night at an invented site (44.1 N, 5.2 E) with one fixed
// target whose name is markup.
func testSpec(t *testing.T, name string) Spec {
	t.Helper()
	o, err := ephem.NewObserver(44.1, 5.2, 600)
	if err != nil {
		t.Fatal(err)
	}
	site := constraints.NewSite(o)
	site.Location = time.UTC
	st, err := ephem.NewStar(83.8, -5.4, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	start := time.Date(2027, 1, 14, 16, 0, 0, 0, time.UTC)
	return Spec{Title: name, Site: site, Start: start, End: start.Add(15 * time.Hour), Step: 10 * time.Minute,
		Curves:   []Curve{{Name: name, Target: &constraints.Target{Name: name, Star: &st}, Runs: []Run{{Start: start.Add(4 * time.Hour), End: start.Add(5 * time.Hour), Label: name}}}},
		Closures: []Span{{Start: start.Add(6 * time.Hour), End: start.Add(7 * time.Hour), Label: name}}}
}

// TestWriteSVGEscapes: names are text in the SVG, never markup, and the
// document is well-formed XML.
func TestWriteSVGEscapes(t *testing.T) {
	const evil = `<script>alert(1)</script>`
	for _, th := range []*Theme{nil, &Dark} {
		spec := testSpec(t, evil)
		spec.Theme = th
		var buf bytes.Buffer
		if err := WriteSVG(&buf, spec); err != nil {
			t.Fatal(err)
		}
		if strings.Contains(buf.String(), "<script") {
			t.Fatalf("theme %v: the SVG holds a raw <script> element", th)
		}
		if !strings.Contains(buf.String(), "&lt;script&gt;alert(1)&lt;/script&gt;") {
			t.Fatalf("theme %v: the escaped name is missing", th)
		}
		d := xml.NewDecoder(&buf)
		for {
			_, err := d.Token()
			if err == io.EOF {
				break
			}
			if err != nil {
				t.Fatalf("theme %v: SVG is not well-formed: %v", th, err)
			}
		}
	}
}

// TestDarkHasNoWhite: the night theme paints nothing white or near white
// (night vision).
func TestDarkHasNoWhite(t *testing.T) {
	spec := testSpec(t, "NLD 12")
	spec.Theme = &Dark
	var buf bytes.Buffer
	if err := WriteSVG(&buf, spec); err != nil {
		t.Fatal(err)
	}
	for _, white := range []string{"#ffffff", "#FFFFFF", "rgb(255,255,255)", "fill:white"} {
		if strings.Contains(buf.String(), white) {
			t.Errorf("dark chart contains %s", white)
		}
	}
}
