package elements

import (
	"errors"
	"math"
	"testing"

	"github.com/nightloom/nightloom/ephem"
)

// FuzzParse: any text either parses into valid orbits or is refused with
// *LineError values whose columns lie within 1..len(line)+width; never a
// panic. Parsed elements always pass ephem's own validation, and a
// minor planet's perihelion lies within half a period of its epoch.
func FuzzParse(f *testing.F) {
	for _, s := range []string{cometHyperbolic, cometNumbered, minorProvisonal, minorNumbered,
		cometHyperbolic + "\n" + minorNumbered, "", "#\n", "    C", "K31AH", minorProvisonal[:50]} {
		f.Add(s, false)
	}
	f.Fuzz(func(t *testing.T, text string, skip bool) {
		els, err := Parse(text, skip)
		var le *LineError
		if err != nil && !errors.Is(err, ErrNoElements) && !errors.As(err, &le) {
			t.Fatalf("error %v is neither ErrNoElements nor a *LineError", err)
		}
		if le != nil && (le.Line < 1 || le.FirstCol < 1 || le.LastCol < le.FirstCol) {
			t.Fatalf("bad error position %+v", le)
		}
		if err != nil && !skip && els != nil {
			t.Fatalf("elements returned with an error and skipBad false")
		}
		for _, el := range els {
			if err := el.Orbit.Validate(); err != nil {
				t.Fatalf("parsed orbit fails validation: %v (%+v)", err, el)
			}
			if el.Format == FormatMinorPlanet {
				n := gaussKDeg / math.Pow(el.SemiMajorAU, 1.5)
				ep := ttDate(el.Epoch.Year(), el.Epoch.Month(), float64(el.Epoch.Day()))
				d := (el.Orbit.PerihelionTT.Hi - ep.Hi) + (el.Orbit.PerihelionTT.Lo - ep.Lo)
				if math.Abs(d)*n > 180+1e-6 {
					t.Fatalf("perihelion %g days from the epoch, more than half a period", d)
				}
			}
			if _, err := ephem.NewConic(el.Orbit); err != nil {
				t.Fatal(err)
			}
		}
	})
}
