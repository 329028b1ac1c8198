"""gen_stars_pyephem.py writes stars_pyephem.tsv: the J2000 astrometric place
of every star in PyEphem's built-in star catalogue (python3-ephem from
Debian's packages; its positions come from XEphem's catalogue, a copy
independent of the Hipparcos compilation that d3-celestial ships).

Run by regen.sh:  python3 gen_stars_pyephem.py > stars_pyephem.tsv
"""
import math

import ephem
import ephem.stars

print("# PyEphem %s built-in stars: astrometric RA/Dec at epoch J2000.0 (date 2000/1/1 12:00 in its UT; a minute either way is nothing for a star)"
      % getattr(ephem, "__version__", "4.1.4"))
print("# name\tra_deg\tdec_deg\tmag")
for name in sorted(ephem.stars.stars):
    s = ephem.star(name)
    s.compute("2000/1/1 12:00", epoch="2000/1/1 12:00")
    print("%s\t%.6f\t%.6f\t%.2f" % (name, math.degrees(s.a_ra), math.degrees(s.a_dec), s.mag))
