"""gen_constellations_pyephem.py writes constellations_pyephem.tsv: the
constellation that PyEphem (Debian python3-ephem; libastro's own copy of
Roman's 1987 boundary table and its own precession) gives for every position
of constellations_astronomy_engine.tsv, a second reference independent of
the astronomy-engine table that package catalogue embeds.

Run by regen.sh:  python3 gen_constellations_pyephem.py < constellations_astronomy_engine.tsv > constellations_pyephem.tsv
"""
import math
import sys

import ephem

print("# IAU constellation by PyEphem 4.1.4 ephem.constellation(), J2000 positions of constellations_astronomy_engine.tsv")
print("# kind\tra_j2000_deg\tdec_j2000_deg\tconstellation")
for line in sys.stdin:
    if line.startswith("#") or not line.strip():
        continue
    f = line.rstrip("\n").split("\t")
    ra, dec = float(f[1]), float(f[2])
    abbr, _ = ephem.constellation((math.radians(ra), math.radians(dec)), epoch=ephem.J2000)
    print("%s\t%s\t%s\t%s" % (f[0], f[1], f[2], abbr))
