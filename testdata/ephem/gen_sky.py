#!/usr/bin/python3
"""Generate sky_cases.csv: Sun, Moon and a fixed ICRS star seen from random sites at random instants.

Primary values: astropy (builtin ephemeris: Sun/Earth from erfa.epv00, Moon from erfa.moon98,
the Meeus 1998 truncation of ELP-2000/82, good to ~3 arcsec RMS and ~18 arcsec worst) with
UT1 = UTC and zero polar motion (see ref_common.py).  Moon distances come straight from
erfa.moon98 (geometric, geocentric frame) because astropy's get_body('moon').distance is the
barycentric light-time distance |Moon(t - tau) - Earth(t)|, which differs by up to ~40 km.

Second library: PyEphem with TT forced (columns pyephem_*).
Writes sky_cases.csv and crosscheck_sky.txt next to this file.
"""

import math
import os
import sys

import numpy as np

import ref_common as rc
from ref_common import AltAz, EarthLocation, SkyCoord, TETE, get_body, u, erfa, ephem

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20260101
N_RANDOM = 200
N_NEAR_MOON = 20
N_NEAR_SUN = 16


def make_inputs():
    rng = np.random.default_rng(SEED)
    t0 = rc.datetime_to_ms(rc._dt.datetime(1990, 1, 1, tzinfo=rc._dt.timezone.utc))
    t1 = rc.datetime_to_ms(rc._dt.datetime(2040, 1, 1, tzinfo=rc._dt.timezone.utc))
    rows = []
    # a few fixed rows first
    j2000_utc = rc.datetime_to_ms(rc._dt.datetime(2000, 1, 1, 11, 58, 55, 816000, tzinfo=rc._dt.timezone.utc))
    rows.append(dict(ms=j2000_utc, lat=0.0, lon=0.0, elev=0.0, ra=0.0, dec=0.0, kind="fixed"))
    rows.append(dict(ms=t0, lat=70.0, lon=-179.5, elev=0.0, ra=279.234735, dec=38.783689, kind="fixed"))
    rows.append(dict(ms=t1 - 1, lat=-70.0, lon=179.999999, elev=3000.0, ra=95.987958, dec=-52.695661, kind="fixed"))
    rows.append(dict(ms=rc.datetime_to_ms(rc._dt.datetime(2024, 4, 8, 18, 17, 0, tzinfo=rc._dt.timezone.utc)),
                     lat=25.0, lon=-104.0, elev=1500.0, ra=10.0, dec=89.5, kind="fixed"))
    n_total = N_RANDOM + N_NEAR_MOON + N_NEAR_SUN
    for k in range(n_total):
        ms = int(rng.integers(t0, t1))
        lat = round(float(rng.uniform(-70.0, 70.0)), 6)
        lon = round(float(rng.uniform(-180.0, 180.0)), 6)
        elev = round(float(rng.uniform(0.0, 3000.0)), 1)
        ra = round(float(rng.uniform(0.0, 360.0)), 6)
        dec = round(math.degrees(math.asin(float(rng.uniform(-1.0, 1.0)))), 6)
        kind = "random"
        if k >= N_RANDOM:
            kind = "near_moon" if k < N_RANDOM + N_NEAR_MOON else "near_sun"
        rows.append(dict(ms=ms, lat=lat, lon=lon, elev=elev, ra=ra, dec=dec, kind=kind,
                         off=float(rng.uniform(0.2, 6.0) if kind == "near_moon" else rng.uniform(1.0, 25.0)),
                         pa=float(rng.uniform(0.0, 360.0))))
    return rows


def place_near(rows, body):
    """Move the star of the near_moon / near_sun rows to a small offset from the body's topocentric place."""
    idx = [i for i, r in enumerate(rows) if r["kind"] == "near_" + body]
    if not idx:
        return
    ms = [rows[i]["ms"] for i in idx]
    t = rc.utc_ms_to_time(ms)
    loc = EarthLocation.from_geodetic([rows[i]["lon"] for i in idx] * u.deg, [rows[i]["lat"] for i in idx] * u.deg,
                                      [rows[i]["elev"] for i in idx] * u.m)
    b = get_body(body, t, loc).transform_to(TETE(obstime=t, location=loc))
    for n, i in enumerate(idx):
        r = rows[i]
        off, pa = math.radians(r["off"]), math.radians(r["pa"])
        ra0, de0 = b.ra.rad[n], b.dec.rad[n]
        de = math.asin(math.sin(de0) * math.cos(off) + math.cos(de0) * math.sin(off) * math.cos(pa))
        ra = ra0 + math.atan2(math.sin(pa) * math.sin(off) * math.cos(de0), math.cos(off) - math.sin(de0) * math.sin(de))
        c = SkyCoord(ra * u.rad, de * u.rad, frame=TETE(obstime=t[n], location=loc[n])).icrs
        r["ra"] = round(float(c.ra.deg) % 360.0, 6)
        r["dec"] = round(float(c.dec.deg), 6)


def compute_astropy(rows):
    ms = np.array([r["ms"] for r in rows], dtype=np.int64)
    lat = np.array([r["lat"] for r in rows])
    lon = np.array([r["lon"] for r in rows])
    elev = np.array([r["elev"] for r in rows])
    ra = np.array([r["ra"] for r in rows])
    dec = np.array([r["dec"] for r in rows])
    t = rc.utc_ms_to_time(ms)
    t.delta_ut1_utc = 0.0
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, elev * u.m)  # WGS84
    geo = TETE(obstime=t)
    topo = TETE(obstime=t, location=loc)
    altaz = AltAz(obstime=t, location=loc, pressure=0.0 * u.hPa)
    out = {}

    sun_g = get_body("sun", t)
    sun_t = get_body("sun", t, loc)
    sg, st, sa = sun_g.transform_to(geo), sun_t.transform_to(topo), sun_t.transform_to(altaz)
    out["sun_app_ra_deg"], out["sun_app_dec_deg"] = sg.ra.deg, sg.dec.deg
    out["sun_topo_ra_deg"], out["sun_topo_dec_deg"] = st.ra.deg, st.dec.deg
    out["sun_alt_deg"], out["sun_az_deg"] = sa.alt.deg, sa.az.deg
    pvh, pvb = erfa.epv00(t.tdb.jd1, t.tdb.jd2)
    earth_helio = pvh["p"]
    out["sun_dist_au"] = np.linalg.norm(earth_helio, axis=-1)  # geometric geocentric Sun distance
    aux = {"astropy_sun_dist_au": sun_g.distance.au}

    moon_g = get_body("moon", t)
    moon_t = get_body("moon", t, loc)
    mg, mt, ma = moon_g.transform_to(geo), moon_t.transform_to(topo), moon_t.transform_to(altaz)
    out["moon_app_ra_deg"], out["moon_app_dec_deg"] = mg.ra.deg, mg.dec.deg
    out["moon_topo_ra_deg"], out["moon_topo_dec_deg"] = mt.ra.deg, mt.dec.deg
    out["moon_alt_deg"], out["moon_az_deg"] = ma.alt.deg, ma.az.deg
    moon_geo_au = erfa.moon98(t.tt.jd1, t.tt.jd2)["p"]  # GCRS, geometric, AU
    obsgeoloc, _ = loc.get_gcrs_posvel(t)
    site_au = obsgeoloc.xyz.to_value(u.au).T
    out["moon_dist_km"] = np.linalg.norm(moon_geo_au, axis=-1) * rc.AU_KM
    out["moon_topo_dist_km"] = np.linalg.norm(moon_geo_au - site_au, axis=-1) * rc.AU_KM
    aux["astropy_moon_dist_km"] = moon_g.distance.km
    aux["astropy_moon_topo_dist_km"] = moon_t.distance.km

    # illuminated fraction, Meeus, Astronomical Algorithms 2nd ed., eqs. 48.2-48.3 (phase angle from elongation)
    def illum(sra, sdec, r_km, mra, mdec, d_km):
        psi = np.radians(rc.sep_deg(sra, sdec, mra, mdec))
        i = np.arctan2(r_km * np.sin(psi), d_km - r_km * np.cos(psi))
        return (1.0 + np.cos(i)) / 2.0

    r_km = out["sun_dist_au"] * rc.AU_KM
    out["moon_illum"] = illum(sg.ra.deg, sg.dec.deg, r_km, mg.ra.deg, mg.dec.deg, out["moon_dist_km"])
    sun_topo_km = np.linalg.norm(-earth_helio - site_au, axis=-1) * rc.AU_KM
    out["moon_topo_illum"] = illum(st.ra.deg, st.dec.deg, sun_topo_km, mt.ra.deg, mt.dec.deg, out["moon_topo_dist_km"])

    star = SkyCoord(ra * u.deg, dec * u.deg, frame="icrs")
    xg, xt, xa = star.transform_to(geo), star.transform_to(topo), star.transform_to(altaz)
    out["star_app_ra_deg"], out["star_app_dec_deg"] = xg.ra.deg, xg.dec.deg
    out["star_alt_deg"], out["star_az_deg"] = xa.alt.deg, xa.az.deg
    out["star_moon_sep_deg"] = rc.sep_deg(xt.ra.deg, xt.dec.deg, mt.ra.deg, mt.dec.deg)
    out["star_sun_sep_deg"] = rc.sep_deg(xt.ra.deg, xt.dec.deg, st.ra.deg, st.dec.deg)

    # self-check of the astropy frames against ERFA's own pipeline (atco13 / atci13, dut1 = xp = yp = 0)
    aob, zob, _, _, _, _ = erfa.atco13(np.radians(ra), np.radians(dec), 0, 0, 0, 0, t.utc.jd1, t.utc.jd2, 0.0,
                                        np.radians(lon), np.radians(lat), elev, 0.0, 0.0, 0.0, 10.0, 0.0, 0.55)
    chk_altaz = rc.sep_deg(np.degrees(aob), 90.0 - np.degrees(zob), xa.az.deg, xa.alt.deg) * 3.6e6
    ri, di, eo = erfa.atci13(np.radians(ra), np.radians(dec), 0, 0, 0, 0, t.tt.jd1, t.tt.jd2)
    chk_tete = rc.sep_deg(np.degrees(erfa.anp(ri - eo)), np.degrees(di), xg.ra.deg, xg.dec.deg) * 3.6e6
    aux["check_altaz_mas"] = chk_altaz
    aux["check_tete_mas"] = chk_tete
    ttmutc = (t.tt.jd1 - t.utc.jd1 + (t.tt.jd2 - t.utc.jd2)) * 86400.0
    aux["ttmutc_astropy"] = ttmutc
    return out, aux


def compute_pyephem(rows):
    cols = {k: [] for k in (
        "pyephem_sun_app_ra_deg", "pyephem_sun_app_dec_deg", "pyephem_sun_topo_ra_deg", "pyephem_sun_topo_dec_deg",
        "pyephem_sun_alt_deg", "pyephem_sun_az_deg", "pyephem_sun_dist_au",
        "pyephem_moon_app_ra_deg", "pyephem_moon_app_dec_deg", "pyephem_moon_topo_ra_deg", "pyephem_moon_topo_dec_deg",
        "pyephem_moon_alt_deg", "pyephem_moon_az_deg", "pyephem_moon_dist_km", "pyephem_moon_topo_dist_km",
        "pyephem_moon_illum",
        "pyephem_star_app_ra_deg", "pyephem_star_app_dec_deg", "pyephem_star_alt_deg", "pyephem_star_az_deg",
        "pyephem_date_shift_s",
        "pyephem_uncorrected_moon_app_ra_deg", "pyephem_uncorrected_moon_app_dec_deg")}
    deg = lambda a: math.degrees(float(a))
    for r in rows:
        ttmutc = rc.tt_minus_utc(r["ms"])
        djd = rc.utc_ms_to_djd(r["ms"])
        d, delta = rc.pyephem_date(djd, ttmutc)
        obs = rc.pyephem_observer(r["lat"], r["lon"], r["elev"], d, delta)
        s, m = ephem.Sun(), ephem.Moon()
        s.compute(d)
        m.compute(d)
        cols["pyephem_sun_app_ra_deg"].append(deg(s.g_ra))
        cols["pyephem_sun_app_dec_deg"].append(deg(s.g_dec))
        cols["pyephem_sun_dist_au"].append(float(s.earth_distance))
        cols["pyephem_moon_app_ra_deg"].append(deg(m.g_ra))
        cols["pyephem_moon_app_dec_deg"].append(deg(m.g_dec))
        cols["pyephem_moon_dist_km"].append(float(m.earth_distance) * rc.AU_KM)
        cols["pyephem_moon_illum"].append(float(m.moon_phase))
        s.compute(obs)
        m.compute(obs)
        cols["pyephem_sun_topo_ra_deg"].append(deg(s.ra))
        cols["pyephem_sun_topo_dec_deg"].append(deg(s.dec))
        cols["pyephem_sun_alt_deg"].append(deg(s.alt))
        cols["pyephem_sun_az_deg"].append(deg(s.az))
        cols["pyephem_moon_topo_ra_deg"].append(deg(m.ra))
        cols["pyephem_moon_topo_dec_deg"].append(deg(m.dec))
        cols["pyephem_moon_alt_deg"].append(deg(m.alt))
        cols["pyephem_moon_az_deg"].append(deg(m.az))
        cols["pyephem_moon_topo_dist_km"].append(float(m.earth_distance) * rc.AU_KM)
        x = ephem.FixedBody()
        x._ra = math.radians(r["ra"])
        x._dec = math.radians(r["dec"])
        x._epoch = ephem.J2000
        x.compute(d)
        cols["pyephem_star_app_ra_deg"].append(deg(x.g_ra))
        cols["pyephem_star_app_dec_deg"].append(deg(x.g_dec))
        x.compute(obs)
        cols["pyephem_star_alt_deg"].append(deg(x.alt))
        cols["pyephem_star_az_deg"].append(deg(x.az))
        cols["pyephem_date_shift_s"].append(delta)
        mu = ephem.Moon()
        mu.compute(djd)  # what PyEphem gives when handed the UTC date as is
        cols["pyephem_uncorrected_moon_app_ra_deg"].append(deg(mu.g_ra))
        cols["pyephem_uncorrected_moon_app_dec_deg"].append(deg(mu.g_dec))
    return {k: np.array(v) for k, v in cols.items()}


COLUMNS = [
    ("sun_app_ra_deg", "%.9f"), ("sun_app_dec_deg", "%.9f"), ("sun_topo_ra_deg", "%.9f"), ("sun_topo_dec_deg", "%.9f"),
    ("sun_alt_deg", "%.9f"), ("sun_az_deg", "%.9f"), ("sun_dist_au", "%.12f"),
    ("moon_app_ra_deg", "%.9f"), ("moon_app_dec_deg", "%.9f"), ("moon_topo_ra_deg", "%.9f"), ("moon_topo_dec_deg", "%.9f"),
    ("moon_alt_deg", "%.9f"), ("moon_az_deg", "%.9f"), ("moon_dist_km", "%.6f"), ("moon_topo_dist_km", "%.6f"),
    ("moon_illum", "%.9f"),
    ("star_app_ra_deg", "%.9f"), ("star_app_dec_deg", "%.9f"), ("star_alt_deg", "%.9f"), ("star_az_deg", "%.9f"),
    ("star_moon_sep_deg", "%.9f"), ("star_sun_sep_deg", "%.9f"),
    ("moon_topo_illum", "%.9f"),
    ("pyephem_sun_app_ra_deg", "%.9f"), ("pyephem_sun_app_dec_deg", "%.9f"),
    ("pyephem_sun_topo_ra_deg", "%.9f"), ("pyephem_sun_topo_dec_deg", "%.9f"),
    ("pyephem_sun_alt_deg", "%.9f"), ("pyephem_sun_az_deg", "%.9f"), ("pyephem_sun_dist_au", "%.9f"),
    ("pyephem_moon_app_ra_deg", "%.9f"), ("pyephem_moon_app_dec_deg", "%.9f"),
    ("pyephem_moon_topo_ra_deg", "%.9f"), ("pyephem_moon_topo_dec_deg", "%.9f"),
    ("pyephem_moon_alt_deg", "%.9f"), ("pyephem_moon_az_deg", "%.9f"),
    ("pyephem_moon_dist_km", "%.3f"), ("pyephem_moon_topo_dist_km", "%.3f"), ("pyephem_moon_illum", "%.7f"),
    ("pyephem_star_app_ra_deg", "%.9f"), ("pyephem_star_app_dec_deg", "%.9f"),
    ("pyephem_star_alt_deg", "%.9f"), ("pyephem_star_az_deg", "%.9f"),
    ("pyephem_date_shift_s", "%.3f"),
]

CONVENTIONS = [
    "instants: utc is UTC; TT = UTC + (TAI-UTC, ERFA leap-second table; 37 s after 2017-01-01) + 32.184 s; UT1 = UTC (DUT1 = 0); polar motion zero",
    "sites: geodetic latitude/longitude (east positive) and height on the WGS84 ellipsoid",
    "star: fixed ICRS direction (star_ra_deg, star_dec_deg), no proper motion, no parallax",
    "*_app_ra/dec: geocentric apparent place, true equator and true equinox of date (astropy TETE, IAU 2006/2000A), incl. light-time, annual aberration and solar light deflection",
    "*_topo_ra/dec: topocentric apparent place, same frame, seen from the site (incl. diurnal parallax and the site's velocity in the aberration)",
    "*_alt/az: geometric (no refraction, pressure 0) topocentric apparent altitude; azimuth from north through east; vertical = WGS84 ellipsoid normal",
    "sun_dist_au: geocentric geometric Sun distance at the instant (erfa.epv00); moon_dist_km: geocentric geometric Moon distance (erfa.moon98); moon_topo_dist_km: site-to-Moon geometric distance",
    "moon_illum: GEOCENTRIC illuminated fraction (1+cos i)/2, phase angle i from the geocentric apparent Sun-Moon elongation (Meeus, Astronomical Algorithms, eqs. 48.2-48.3); moon_topo_illum: the same from the topocentric places",
    "star_moon_sep_deg / star_sun_sep_deg: separation between the TOPOCENTRIC apparent directions",
    "Sun = erfa.epv00 via astropy's builtin ephemeris; Moon = erfa.moon98 (Meeus 1998 truncated ELP-2000/82: ~3 arcsec RMS, ~18 arcsec worst against ELP/MPP02, per the ERFA notes) via astropy",
    "pyephem_*: PyEphem with TT forced (date shifted by pyephem_date_shift_s = DeltaT_pyephem - (TT-UTC), observer longitude turned east by 15.041 arcsec/s of shift); pyephem_moon_dist_km geocentric, pyephem_moon_topo_dist_km topocentric, pyephem_moon_illum = PyEphem moon_phase of the geocentric compute",
]


def main():
    rows = make_inputs()
    place_near(rows, "moon")
    place_near(rows, "sun")
    out, aux = compute_astropy(rows)
    pe = compute_pyephem(rows)
    ttmutc = np.array([rc.tt_minus_utc(r["ms"]) for r in rows])
    assert np.max(np.abs(ttmutc - aux["ttmutc_astropy"])) < 1e-4, "astropy and ERFA leap seconds disagree"
    assert np.max(aux["check_altaz_mas"]) < 0.1 and np.max(aux["check_tete_mas"]) < 0.1, "astropy frames differ from ERFA"
    allc = dict(out)
    allc.update(pe)

    path = os.path.join(HERE, "sky_cases.csv")
    with open(path, "w") as f:
        for line in rc.header_lines("nightloom ephem reference table: Sun, Moon and a fixed star (sky_cases.csv)",
                                    "testdata/ephem/gen_sky.py", CONVENTIONS):
            f.write(line + "\n")
        names = ["utc", "lat_deg", "lon_deg", "elev_m", "star_ra_deg", "star_dec_deg"] + [c for c, _ in COLUMNS] + ["case"]
        f.write(",".join(names) + "\n")
        for i, r in enumerate(rows):
            vals = [rc.rfc3339_ms(r["ms"]), "%.6f" % r["lat"], "%.6f" % r["lon"], "%.1f" % r["elev"],
                    "%.6f" % r["ra"], "%.6f" % r["dec"]]
            vals += [fmt % allc[c][i] for c, fmt in COLUMNS]
            vals.append(r["kind"])
            f.write(",".join(vals) + "\n")

    # ---- cross-library statistics
    A = lambda a, b, c, d: rc.sep_deg(out[a], out[b], pe[c], pe[d]) * 3600.0
    lines = ["sky_cases.csv: astropy (primary) minus PyEphem (TT forced), %d rows" % len(rows),
             "angles in arcsec (great-circle differences), distances in km or AU"]
    lines.append("Sun apparent geocentric RA/Dec: " + rc.stats(A("sun_app_ra_deg", "sun_app_dec_deg", "pyephem_sun_app_ra_deg", "pyephem_sun_app_dec_deg")))
    lines.append("Sun apparent topocentric RA/Dec: " + rc.stats(A("sun_topo_ra_deg", "sun_topo_dec_deg", "pyephem_sun_topo_ra_deg", "pyephem_sun_topo_dec_deg")))
    lines.append("Sun alt/az (on the sky): " + rc.stats(rc.sep_deg(out["sun_az_deg"], out["sun_alt_deg"], pe["pyephem_sun_az_deg"], pe["pyephem_sun_alt_deg"]) * 3600))
    lines.append("Sun altitude only: " + rc.stats((out["sun_alt_deg"] - pe["pyephem_sun_alt_deg"]) * 3600))
    lines.append("Sun distance (AU): " + rc.stats(out["sun_dist_au"] - pe["pyephem_sun_dist_au"]))
    lines.append("Moon apparent geocentric RA/Dec: " + rc.stats(A("moon_app_ra_deg", "moon_app_dec_deg", "pyephem_moon_app_ra_deg", "pyephem_moon_app_dec_deg")))
    lines.append("Moon apparent geocentric RA/Dec, PyEphem WITHOUT the TT correction: " + rc.stats(A("moon_app_ra_deg", "moon_app_dec_deg", "pyephem_uncorrected_moon_app_ra_deg", "pyephem_uncorrected_moon_app_dec_deg")))
    lines.append("Moon apparent topocentric RA/Dec: " + rc.stats(A("moon_topo_ra_deg", "moon_topo_dec_deg", "pyephem_moon_topo_ra_deg", "pyephem_moon_topo_dec_deg")))
    lines.append("Moon alt/az (on the sky): " + rc.stats(rc.sep_deg(out["moon_az_deg"], out["moon_alt_deg"], pe["pyephem_moon_az_deg"], pe["pyephem_moon_alt_deg"]) * 3600))
    lines.append("Moon altitude only: " + rc.stats((out["moon_alt_deg"] - pe["pyephem_moon_alt_deg"]) * 3600))
    lines.append("Moon geocentric distance (km): " + rc.stats(out["moon_dist_km"] - pe["pyephem_moon_dist_km"]))
    lines.append("Moon topocentric distance (km): " + rc.stats(out["moon_topo_dist_km"] - pe["pyephem_moon_topo_dist_km"]))
    lines.append("Moon illuminated fraction, geocentric vs PyEphem moon_phase: " + rc.stats(out["moon_illum"] - pe["pyephem_moon_illum"]))
    lines.append("Moon illuminated fraction, topocentric vs PyEphem moon_phase: " + rc.stats(out["moon_topo_illum"] - pe["pyephem_moon_illum"]))
    lines.append("Star apparent geocentric RA/Dec: " + rc.stats(A("star_app_ra_deg", "star_app_dec_deg", "pyephem_star_app_ra_deg", "pyephem_star_app_dec_deg")))
    lines.append("Star alt/az (on the sky): " + rc.stats(rc.sep_deg(out["star_az_deg"], out["star_alt_deg"], pe["pyephem_star_az_deg"], pe["pyephem_star_alt_deg"]) * 3600))
    lines.append("internal: geocentric vs topocentric Moon illuminated fraction: " + rc.stats(out["moon_illum"] - out["moon_topo_illum"]))
    lines.append("internal: astropy get_body('moon').distance minus erfa.moon98 geometric distance (km), geocentric: " + rc.stats(aux["astropy_moon_dist_km"] - out["moon_dist_km"]))
    lines.append("internal: astropy get_body('sun').distance minus epv00 geometric distance (AU): " + rc.stats(aux["astropy_sun_dist_au"] - out["sun_dist_au"]))
    lines.append("internal: astropy AltAz vs erfa.atco13 for the star (mas): " + rc.stats(aux["check_altaz_mas"]))
    lines.append("internal: astropy TETE vs erfa.atci13 - eo for the star (mas): " + rc.stats(aux["check_tete_mas"]))
    lines.append("PyEphem date shift DeltaT_pyephem - (TT-UTC) (s): min %.3f max %.3f" % (pe["pyephem_date_shift_s"].min(), pe["pyephem_date_shift_s"].max()))
    with open(os.path.join(HERE, "crosscheck_sky.txt"), "w") as f:
        f.write("\n".join(lines) + "\n")
    print("\n".join(lines))
    print("wrote %s (%d rows)" % (path, len(rows)))


if __name__ == "__main__":
    sys.exit(main())
