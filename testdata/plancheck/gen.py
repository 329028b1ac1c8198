"""Evaluate a few nightloom plans with PyEphem (Debian's python3-ephem).

Reads plans.json (written by `go test ./scheduler -run TestPlanCheckPyEphem -update-plancheck`:
for each night the site, and for each run its target, the block's constraints and the instants
to check, every 2 minutes inside the run and at both ends) and writes pyephem_runs.csv: at every
instant the target's geometric topocentric altitude and azimuth, the Sun's geometric altitude
(centre), and the target's separations from the Sun and the Moon, and the Moon's altitude, all
from PyEphem.  scheduler/plancheck_test.go reads the table; no Python runs at test time.

Conventions forced on PyEphem (see DESIGN.md, "Reference libraries: known pitfalls", and
testdata/ephem/ref_common.py, whose method is repeated here so that only PyEphem is needed):

* instants are UTC; TT = UTC + (TAI-UTC) + 32.184 s, TAI-UTC from the leap-second table below;
* PyEphem treats its dates as UT and adds its own Delta T: it is handed a shifted date d with
  d + DeltaT_pyephem(d) = true TT, and the observer's longitude is turned east by the Earth
  rotation angle of the shift, so that its sidereal time is that of UT1 = UTC;
* pressure 0: altitudes are geometric (the Go test adds nightloom's documented refraction);
  the Sun's altitude is its centre's (the darkness thresholds are for the centre);
* fixed targets: the ICRS place at the night (proper motion applied by the exporter), equinox
  J2000; orbits: Elliptical/HyperbolicBody from perihelion elements (J2000 ecliptic), the
  perihelion time in TT, as testdata/ephem/gen_orbit.py does (the exporter never gives e = 1);
* separations between PyEphem's topocentric apparent ra/dec of the two bodies.

Run: bash testdata/plancheck/gen.sh (installs python3-ephem when missing).
"""

import csv
import datetime as dt
import json
import math
import os
import sys

import ephem

HERE = os.path.dirname(os.path.abspath(__file__))
DJD_OFFSET = 2415020.0  # PyEphem dates are Dublin Julian Dates (JD - 2415020)
# Earth rotation angle rate (IERS Conventions 2010, eq. 5.15), degrees per UT1 second.
ERA_DEG_PER_S = 360.0 * 1.00273781191135448 / 86400.0

# TAI-UTC (s) from the IERS leap-second table (Bulletin C): 37 s since 2017-01-01, the last
# leap second; nightloom's ephem.LeapSeconds holds the same table.  Earlier entries are not
# needed by the plans (2025-2030).
LEAP = [(dt.datetime(2017, 1, 1, tzinfo=dt.timezone.utc), 37.0)]


def tt_minus_utc(t):
    if t < LEAP[0][0]:
        sys.exit("gen.py: instant %s before the leap-second table" % t)
    return LEAP[-1][1] + 32.184


def pyephem_date(utc_djd, ttmutc_s):
    """Date d and shift delta (s) with d + DeltaT_pyephem(d) = UTC + (TT-UTC); delta = UTC - d."""
    d, delta = utc_djd, 0.0
    for _ in range(6):
        delta = ephem.delta_t(d) - ttmutc_s
        d = utc_djd - delta / 86400.0
    return d, delta


def observer(night, d, delta_s):
    o = ephem.Observer()
    o.lat = math.radians(night["lat_deg"])
    lon = night["lon_deg"] + delta_s * ERA_DEG_PER_S
    o.lon = math.radians((lon + 180.0) % 360.0 - 180.0)
    o.elevation = night["elevation_m"]
    o.pressure = 0.0
    o.temp = night["temp_c"]
    o.date = d
    return o


def body(run):
    if run.get("orbit") is None:
        b = ephem.FixedBody()
        b._ra = math.radians(run["ra_deg"])
        b._dec = math.radians(run["dec_deg"])
        b._epoch = ephem.J2000
        return b
    el = run["orbit"]
    q, e = el["q_au"], el["e"]
    T = ephem.Date(el["perihelion_tt_jd"] - DJD_OFFSET)  # TT as a PyEphem date (see above)
    if e < 1:
        b = ephem.EllipticalBody()
        b._a = q / (1 - e)
        b._e = e
        b._M = 0.0
        b._epoch_M = T
    elif e > 1:
        b = ephem.HyperbolicBody()
        b._q = q
        b._e = e
        b._epoch_p = T
    else:
        sys.exit("gen.py: e = 1 exactly; PyEphem's parabolic shortcut is off by ~20 arcsec")
    b._inc, b._Om, b._om = el["inc_deg"], el["node_deg"], el["peri_deg"]
    b._epoch = ephem.J2000
    return b


def main():
    with open(os.path.join(HERE, "plans.json")) as f:
        plans = json.load(f)
    out = os.path.join(HERE, "pyephem_runs.csv")
    n = 0
    with open(out, "w", newline="") as f:
        f.write("# PyEphem %s reference for the plans in plans.json (generator: testdata/plancheck/gen.py, "
                "run: bash testdata/plancheck/gen.sh)\n" % ephem.__version__)
        f.write("# TT = UTC + 37 s + 32.184 s forced (PyEphem date shifted, longitude turned); pressure 0 "
                "(geometric altitudes); Sun altitude of the centre; separations of topocentric apparent "
                "places; degrees\n")
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["seed", "block", "t_ms", "alt_geom_deg", "az_deg", "sun_alt_deg", "sun_sep_deg",
                    "moon_sep_deg", "moon_alt_deg"])
        for night in plans["nights"]:
            for run in night["runs"]:
                b = body(run)
                for ms in run["instants_ms"]:
                    t = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc) + dt.timedelta(milliseconds=ms)
                    djd = ms / 86400000.0 + (2440587.5 - DJD_OFFSET)
                    d, delta = pyephem_date(djd, tt_minus_utc(t))
                    o = observer(night, d, delta)
                    sun, moon = ephem.Sun(), ephem.Moon()
                    sun.compute(o)
                    moon.compute(o)
                    b.compute(o)
                    deg = math.degrees
                    w.writerow([night["seed"], run["block"], ms,
                                "%.7f" % deg(b.alt), "%.7f" % deg(b.az), "%.7f" % deg(sun.alt),
                                "%.7f" % deg(ephem.separation((b.ra, b.dec), (sun.ra, sun.dec))),
                                "%.7f" % deg(ephem.separation((b.ra, b.dec), (moon.ra, moon.dec))),
                                "%.7f" % deg(moon.alt)])
                    n += 1
    print("gen.py: wrote %d rows to %s with PyEphem %s" % (n, out, ephem.__version__))


if __name__ == "__main__":
    main()
