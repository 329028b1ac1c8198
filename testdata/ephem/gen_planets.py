#!/usr/bin/python3
"""Generate planet_cases.csv: places, distances and magnitudes of Mercury..Neptune.

Positions and distances: PyEphem (libastro: the VSOP87 theory, its own precession, nutation,
aberration and light deflection) with TT forced from the leap-second table and UT1 = UTC, as in
ref_common.py.  Observer with pressure 0 (no refraction):
  * ra_deg/dec_deg:   PyEphem ra/dec, apparent topocentric, true equator and equinox of date;
  * g_ra_deg/g_dec_deg: PyEphem g_ra/g_dec, apparent geocentric;
  * a_ra_deg/a_dec_deg: PyEphem a_ra/a_dec, astrometric geocentric (ICRS, light time);
  * delta_au: PyEphem earth_distance, r_au: PyEphem sun_distance: both geometric, at the
    instant (no light time), from the observer and from the Sun;
  * phase_deg: the Sun-planet-observer angle by the law of cosines from r_au, delta_au and the
    Earth's distance from the Sun (erfa.epv00); elong_deg: PyEphem elong.
Distances, second source: the npm package astronomia 4.2.0, whose planetposition module evaluates
the full VSOP87B series (planets/astronomia_distances.cjs, run with node): astronomia_r_au and
astronomia_geo_delta_au, geometric at the instant TT (as TDB), the latter from the geocentre.
PyEphem's own distances differ from the full series by up to about 1e-6 relative.
Magnitudes: skyfield's magnitudelib (python3-skyfield), the implementation of Mallama & Hilton
(2018) "Computing apparent planetary magnitudes for The Astronomical Almanac", fed with r, delta,
phase from the columns above, the sub-latitudes of Saturn and Uranus from skyfield's pole vectors
and the astrometric direction, and the sub-solar latitude from the heliocentric vector (astrometric
vector plus the observer's heliocentric vector, the Earth's from erfa.epv00).
"""

import json
import math
import os
import random
import subprocess

import numpy as np

import ref_common as rc
from ref_common import erfa, ephem
from skyfield import magnitudelib as ml
import skyfield

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20261204
PER_PLANET = 30
NAMES = ["Mercury", "Venus", "Mars", "Jupiter", "Saturn", "Uranus", "Neptune"]
# 1990-01-01 .. 2040-01-01 in ms since 1970
T0 = 631152000000
T1 = 2208988800000


def earth_helio_icrs(ms):
    """Earth heliocentric position (AU, BCRS axes) at TT ~ TDB from erfa.epv00."""
    jd = ms / 86400000.0 + 2440587.5 + rc.tt_minus_utc(ms) / 86400.0
    pvh, _ = erfa.epv00(2440587.5, jd - 2440587.5)
    return np.array(pvh["p"])


def main():
    rng = random.Random(SEED)
    rows = []
    for name in NAMES:
        for k in range(PER_PLANET):
            ms = rng.randrange(T0, T1)
            lat = rng.uniform(-70, 70)
            lon = rng.uniform(-180, 180)
            elev = rng.uniform(0, 3000)
            lat, lon, elev = round(lat, 6), round(lon, 6), round(elev, 1)
            ttmutc = rc.tt_minus_utc(ms)
            d, delta_s = rc.pyephem_date(rc.utc_ms_to_djd(ms), ttmutc)
            obs = rc.pyephem_observer(lat, lon, elev, d, delta_s)
            b = getattr(ephem, name)()
            b.compute(obs)
            r = b.sun_distance
            dl = b.earth_distance
            el = abs(float(b.elong))
            # Phase angle from the triangle Sun-observer-planet (law of cosines), with the
            # observer's distance from the Sun R from erfa.epv00 (the observer's offset from the
            # geocentre, under 5e-5 AU, changes the phase by under 0.01 deg).
            R = float(np.linalg.norm(earth_helio_icrs(ms)))
            cosph = (r * r + dl * dl - R * R) / (2 * r * dl)
            phase = math.degrees(math.acos(max(-1.0, min(1.0, cosph))))
            u = rc.unit_from_radec(math.degrees(b.a_ra), math.degrees(b.a_dec))
            topo_vec = u * dl
            helio = earth_helio_icrs(ms) + topo_vec
            t_year = 2000.0 + (ms / 86400000.0 + 2440587.5 - 2451545.0) / 365.25
            fn = ml._FUNCTIONS[{"Mercury": 199, "Venus": 299, "Mars": 499, "Jupiter": 599, "Saturn": 699, "Uranus": 799, "Neptune": 899}[name]]
            if name in ("Saturn", "Uranus"):
                pole = ml._SATURN_POLE if name == "Saturn" else ml._URANUS_POLE
                sun_lat = float(rc.angle_between(pole, helio)) - 90.0
                obs_lat = float(rc.angle_between(pole, topo_vec)) - 90.0
                mag = fn(r, dl, phase, sun_lat, obs_lat)
            elif name == "Neptune":
                mag = fn(r, dl, phase, t_year)
            else:
                mag = fn(r, dl, phase)
            mag = float(mag)
            rows.append([
                rc.rfc3339_ms(ms), name.lower(), "%.6f" % lat, "%.6f" % lon, "%.1f" % elev,
                "%.9f" % math.degrees(b.ra), "%.9f" % math.degrees(b.dec),
                "%.9f" % math.degrees(b.g_ra), "%.9f" % math.degrees(b.g_dec),
                "%.9f" % math.degrees(b.a_ra), "%.9f" % math.degrees(b.a_dec),
                "%.10f" % dl, "%.10f" % r, "%.6f" % math.degrees(el), "%.6f" % phase,
                "" if math.isnan(mag) else "%.4f" % mag, "%.3f" % delta_s,
            ])
    # Second source for the distances: astronomia's full VSOP87B (needs NODE_PATH).
    req = []
    for r in rows:
        ms = rc.datetime_to_ms(__import__("datetime").datetime.fromisoformat(r[0].replace("Z", "+00:00")))
        req.append({"body": r[1], "jde": ms / 86400000.0 + 2440587.5 + rc.tt_minus_utc(ms) / 86400.0})
    res = subprocess.run(["node", os.path.join(HERE, "planets", "astronomia_distances.cjs")],
                         input=json.dumps(req), capture_output=True, text=True, check=True)
    for r, a in zip(rows, json.loads(res.stdout)):
        r.insert(-1, "%.12f" % a["geo_delta_au"])
        r.insert(-1, "%.12f" % a["r_au"])
    path = os.path.join(HERE, "planet_cases.csv")
    with open(path, "w") as f:
        for line in rc.header_lines(
            "planet_cases.csv: Mercury..Neptune seen from random sites, 1990-2040",
            "gen_planets.py",
            [
                "positions: PyEphem, TT forced, UT1 = UTC, pressure 0; ra/dec apparent topocentric, g_ra/g_dec apparent geocentric, a_ra/a_dec astrometric geocentric",
                "delta_au: PyEphem earth_distance (topocentric), r_au: sun_distance, both geometric at the instant; elong_deg, phase_deg: Sun-observer-planet and Sun-planet-observer",
                "astronomia_*: geometric distances from the full VSOP87B of npm astronomia 4.2.0, geocentric delta",
                "magnitude: skyfield %s magnitudelib (Mallama & Hilton 2018); empty where it gives nan" % skyfield.__version__,
            ],
        ):
            f.write(line + "\n")
        f.write("utc,body,lat_deg,lon_deg,elev_m,ra_deg,dec_deg,g_ra_deg,g_dec_deg,a_ra_deg,a_dec_deg,"
                "delta_au,r_au,elong_deg,phase_deg,magnitude,astronomia_geo_delta_au,astronomia_r_au,pyephem_date_shift_s\n")
        for r in rows:
            f.write(",".join(r) + "\n")
    print("wrote %d rows to %s" % (len(rows), path))


if __name__ == "__main__":
    main()
