#!/usr/bin/python3
"""Generate night_cases.csv: sunset/sunrise, twilights, moonrise/moonset in a 24 h window.

Window: from local mean-solar noon of the date (12:00 UTC - lon/15 h) to 24 h later.
Each event column holds the FIRST crossing of its kind in the window, empty if there is none.

Altitudes are astropy's (Sun: erfa.epv00, Moon: erfa.moon98 through astropy's builtin ephemeris)
topocentric apparent, geometric (pressure 0), UT1 = UTC, polar motion zero, WGS84 site.
  sunset / sunrise:      Sun centre at -0.8333 deg, descending / ascending
  civil/nautical/astronomical dusk / dawn: Sun centre at -6 / -12 / -18 deg, descending / ascending
  moonrise / moonset:    topocentric Moon centre at -(34 arcmin + topocentric semidiameter),
                         semidiameter = asin(1737.4 km / topocentric distance), ascending / descending
Method (no library rise/set routine): sample every 120 s over the window (both ends included),
refine every altitude extremum between samples whose value is within 0.05 deg of a threshold
(and the window's overall extremes) by golden-section search, add those points to the samples,
then find every sign change and bisect each to 0.01 s.  Times are written rounded to 0.1 s.

Cross-check: PyEphem next_setting / next_rising with use_center=True, pressure 0, the same
horizons and TT forced (columns pyephem_*).
Writes night_cases.csv and crosscheck_night.txt next to this file.
"""

import math
import os
import sys

import numpy as np

import ref_common as rc
from ref_common import AltAz, EarthLocation, Time, TimeDelta, get_body, u, erfa, ephem

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20260303
STEP_S = 120.0
WINDOW_S = 86400.0
GRAZE_DEG = 0.05
SUN_EVENTS = [  # (threshold, descending column, ascending column)
    (-0.8333, "sunset", "sunrise"),
    (-6.0, "civil_dusk", "civil_dawn"),
    (-12.0, "nautical_dusk", "nautical_dawn"),
    (-18.0, "astronomical_dusk", "astronomical_dawn"),
]
MOON_H0_DEG = -34.0 / 60.0
EVENT_COLS = ["sunset", "sunrise", "civil_dusk", "civil_dawn", "nautical_dusk", "nautical_dawn",
              "astronomical_dusk", "astronomical_dawn", "moonrise", "moonset"]


class Site:
    def __init__(self, lat, lon, elev, date, case):
        self.lat, self.lon, self.elev, self.date, self.case = lat, lon, elev, date, case
        self.loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, elev * u.m)
        noon = rc.datetime_to_ms(rc._dt.datetime(date.year, date.month, date.day, 12, tzinfo=rc._dt.timezone.utc))
        self.start_ms = noon - int(round(lon / 15.0 * 3600.0 * 1000.0))
        self.t0 = rc.utc_ms_to_time([self.start_ms])[0]

    def times(self, x):
        t = self.t0 + TimeDelta(np.atleast_1d(np.asarray(x, dtype=float)), format="sec")
        t.delta_ut1_utc = 0.0
        return t

    def sun_alt(self, x):
        t = self.times(x)
        return get_body("sun", t, self.loc).transform_to(
            AltAz(obstime=t, location=self.loc, pressure=0.0 * u.hPa)).alt.deg

    def moon_margin(self, x):
        """Topocentric geometric altitude of the Moon's centre minus the moonrise/moonset altitude."""
        t = self.times(x)
        alt = get_body("moon", t, self.loc).transform_to(
            AltAz(obstime=t, location=self.loc, pressure=0.0 * u.hPa)).alt.deg
        moon = erfa.moon98(t.tt.jd1, t.tt.jd2)["p"]
        site, _ = self.loc.get_gcrs_posvel(t)
        d_km = np.linalg.norm(moon - site.xyz.to_value(u.au).T, axis=-1) * rc.AU_KM
        sd = np.degrees(np.arcsin(rc.MOON_RADIUS_KM / d_km))
        return alt - (MOON_H0_DEG - sd)


# ---------------------------------------------------------------- root finding


def golden_extrema(func, a, b, sign, iters=20):
    """Vectorised golden-section search: minimum of sign*func on each [a_k, b_k]; returns (x, func(x))."""
    a, b, sign = np.array(a, float), np.array(b, float), np.array(sign, float)
    g = (math.sqrt(5.0) - 1.0) / 2.0
    c = b - g * (b - a)
    d = a + g * (b - a)
    fc, fd = sign * func(c), sign * func(d)
    for _ in range(iters):
        left = fc < fd  # the minimum lies in [a, d]
        na = np.where(left, a, c)
        nb = np.where(left, d, b)
        nc = np.where(left, nb - g * (nb - na), d)
        nd = np.where(left, c, na + g * (nb - na))
        fp = sign * func(np.where(left, nc, nd))
        fc, fd = np.where(left, fp, fd), np.where(left, fc, fp)
        a, b, c, d = na, nb, nc, nd
    x = (a + b) / 2.0
    return x, func(x)


def bisect_all(func, thr, lo, hi, flo_pos, tol_s=0.01):
    """Vectorised bisection of func(x) - thr_k on [lo_k, hi_k]; flo_pos: sign of the function at lo."""
    lo, hi, thr = np.array(lo, float), np.array(hi, float), np.array(thr, float)
    while np.max(hi - lo) > tol_s:
        mid = (lo + hi) / 2.0
        pos = (func(mid) - thr) > 0
        same = pos == flo_pos
        lo = np.where(same, mid, lo)
        hi = np.where(same, hi, mid)
    return (lo + hi) / 2.0


def crossings(func, thresholds, labels_desc, labels_asc, x, f):
    """All crossings of f = func(x) through each threshold; returns (extremes, {label: [times]})."""
    # refine extrema between samples: near a threshold, plus the window's overall extremes
    inner = np.arange(1, len(x) - 1)
    is_max = (f[inner] > f[inner - 1]) & (f[inner] >= f[inner + 1])
    is_min = (f[inner] < f[inner - 1]) & (f[inner] <= f[inner + 1])
    cand = []
    for k, i in enumerate(inner):
        if not (is_max[k] or is_min[k]):
            continue
        near = min(abs(f[i] - th) for th in thresholds) < GRAZE_DEG
        if near or i == int(np.argmax(f)) or i == int(np.argmin(f)):
            cand.append((-1.0 if is_max[k] else 1.0, i - 1, i + 1))
    # the first and last sample intervals: an extremum there has no sample on one side
    for lo_i, hi_i in ((0, 1), (len(x) - 2, len(x) - 1)):
        if min(abs(v - th) for v in (f[lo_i], f[hi_i]) for th in thresholds) < GRAZE_DEG:
            for sgn in (1.0, -1.0):
                cand.append((sgn, lo_i, hi_i))
    xs, fs = list(x), list(f)
    if cand:
        ex, ef = golden_extrema(func, [x[c[1]] for c in cand], [x[c[2]] for c in cand], [c[0] for c in cand])
        xs += list(ex)
        fs += list(ef)
    order = np.argsort(xs)
    xs, fs = np.array(xs)[order], np.array(fs)[order]
    extremes = (float(np.min(fs)), float(np.max(fs)))
    brackets = []
    for th, ld, la in zip(thresholds, labels_desc, labels_asc):
        g = fs - th
        for j in range(len(xs) - 1):
            if (g[j] > 0) != (g[j + 1] > 0):
                brackets.append((th, xs[j], xs[j + 1], g[j] > 0, ld if g[j] > 0 else la))
    events = {}
    if brackets:
        roots = bisect_all(func, [b[0] for b in brackets], [b[1] for b in brackets], [b[2] for b in brackets],
                           np.array([b[3] for b in brackets]))
        for b, r in zip(brackets, roots):
            events.setdefault(b[4], []).append(float(r))
    return extremes, events


def solve_site(site):
    x = np.arange(0.0, WINDOW_S + 0.5 * STEP_S, STEP_S)
    f_sun = site.sun_alt(x)
    sun_ext, sun_ev = crossings(site.sun_alt, [e[0] for e in SUN_EVENTS], [e[1] for e in SUN_EVENTS],
                                [e[2] for e in SUN_EVENTS], x, f_sun)
    f_moon = site.moon_margin(x)
    moon_ext, moon_ev = crossings(site.moon_margin, [0.0], ["moonset"], ["moonrise"], x, f_moon)
    ev = dict(sun_ev)
    ev.update(moon_ev)
    first = {c: (min(ev[c]) if c in ev else None) for c in EVENT_COLS}
    return first, sun_ext, moon_ext, {c: len(ev.get(c, [])) for c in EVENT_COLS}


# ---------------------------------------------------------------- PyEphem cross-check


def pyephem_events(site):
    ttmutc = rc.tt_minus_utc(site.start_ms)
    d0, delta0 = rc.pyephem_date(rc.utc_ms_to_djd(site.start_ms), ttmutc)
    end_ms = site.start_ms + int(WINDOW_S * 1000)
    out = {}

    def to_utc_ms(ev):
        # invert d = UTC - delta: delta = DeltaT_pyephem(d) - (TT-UTC)
        delta = ephem.delta_t(ev) - ttmutc
        return round((float(ev) + delta / 86400.0 - (2440587.5 - rc.DJD_OFFSET)) * 86400000.0)

    def find(body, horizon_deg, setting):
        obs = rc.pyephem_observer(site.lat, site.lon, site.elev, d0, delta0, horizon_deg)
        try:
            ev = obs.next_setting(body, use_center=True) if setting else obs.next_rising(body, use_center=True)
        except (ephem.AlwaysUpError, ephem.NeverUpError):
            return None
        ms = to_utc_ms(ev)
        return ms if ms <= end_ms else None

    for thr, cd, ca in SUN_EVENTS:
        out[cd] = find(ephem.Sun(), thr, True)
        out[ca] = find(ephem.Sun(), thr, False)
    for col, setting in (("moonrise", False), ("moonset", True)):
        sd = 0.259  # deg, a starting guess for the semidiameter
        ms = None
        for _ in range(3):
            ms = find(ephem.Moon(), MOON_H0_DEG - sd, setting)
            if ms is None:
                break
            d, delta = rc.pyephem_date(rc.utc_ms_to_djd(ms), rc.tt_minus_utc(ms))
            m = ephem.Moon(rc.pyephem_observer(site.lat, site.lon, site.elev, d, delta))
            sd = math.degrees(float(m.radius))
        out[col] = ms
    return out


# ---------------------------------------------------------------- the cases


def make_sites():
    rng = np.random.default_rng(SEED)
    D = rc._dt.date

    def year():
        return int(rng.integers(1990, 2040))

    def lon():
        return round(float(rng.uniform(-180.0, 180.0)), 6)

    def elev(top=3000.0):
        return round(float(rng.uniform(0.0, top)), 1)

    sites = []
    high = [
        (60.0, 6, 21, "midsummer: civil dusk but no nautical/astronomical darkness"),
        (61.5, 6, 18, "midsummer: sunset but no civil darkness"),
        (63.0, 6, 24, "midsummer: white night"),
        (64.8, 6, 21, "midsummer: short night"),
        (66.0, 6, 21, "midnight sun: no sunset"),
        (67.5, 6, 10, "midnight sun: no sunset"),
        (69.0, 7, 1, "midnight sun: no sunset"),
        (68.0, 12, 21, "polar night: no sunrise/sunset; civil twilight only"),
        (69.0, 12, 15, "polar night: no sunrise/sunset"),
        (65.0, 12, 21, "midwinter: short day"),
        (62.0, 3, 20, "high latitude; equinox"),
        (64.0, 9, 23, "high latitude; equinox"),
        (60.5, 8, 10, "high latitude; late summer"),
        (66.5, 5, 20, "high latitude; spring"),
        (69.0, 2, 10, "high latitude; end of polar night"),
        (-60.0, 12, 21, "southern midsummer: no nautical/astronomical darkness"),
        (-62.5, 12, 10, "southern midsummer: no civil darkness"),
        (-64.0, 12, 21, "southern midsummer: short night"),
        (-66.0, 12, 21, "southern midnight sun: no sunset"),
        (-67.0, 1, 5, "southern midnight sun"),
        (-69.0, 12, 25, "southern midnight sun: no sunset"),
        (-68.0, 6, 21, "southern polar night: no sunrise/sunset"),
        (-69.0, 6, 10, "southern polar night"),
        (-65.0, 6, 21, "southern midwinter: short day"),
        (-61.0, 3, 21, "southern high latitude; equinox"),
        (-63.0, 9, 22, "southern high latitude; equinox"),
        (-66.6, 11, 20, "southern high latitude; late spring"),
        (-69.0, 8, 5, "southern high latitude; end of polar night"),
    ]
    for lat, m, d, case in high:
        sites.append(Site(lat, lon(), elev(1500.0), D(year(), m, d), case))
    # grazing: latitude tuned so that the Sun's extreme altitude in the window sits just off a threshold
    graze = [  # (threshold, offset of the extremum from it, deg; kind, month, day, hemisphere sign)
        (-18.0, +0.004, "min", 6, 21, +1),
        (-12.0, -0.004, "min", 6, 21, +1),
        (-6.0, +0.0005, "min", 6, 21, +1),
        (-6.0, -0.0005, "min", 6, 21, +1),
        (-0.8333, -0.002, "min", 6, 21, +1),
        (-0.8333, +0.002, "min", 12, 21, -1),
        (-0.8333, -0.001, "max", 6, 21, -1),
        (-12.0, -0.001, "min", 12, 21, -1),
    ]
    for thr, off, kind, m, d, hemi in graze:
        date, lo, el = D(year(), m, d), lon(), elev(500.0)
        target = thr + off
        # first guess from the solar declination: extreme altitude ~ +-(90 - |lat| -+ |dec|)
        lat0 = hemi * ((90.0 - 23.44 + target) if kind == "min" else (90.0 - 23.44 - target))
        lat = tune_latitude(lat0, lo, el, date, kind, target)
        sites.append(Site(round(lat, 6), lo, el, date,
                          "grazing: Sun %s altitude %+.4f deg from %.4f" % (kind, off, thr)))
    for _ in range(44):
        y = year()
        while True:
            doy = int(rng.integers(0, 365))
            date = D(y, 1, 1) + rc._dt.timedelta(days=doy)
            if (date.month, date.day) not in ((6, 30), (12, 31)):  # keep leap seconds out of the windows
                break
        lat = round(float(rng.uniform(-58.0, 58.0)), 6)
        sites.append(Site(lat, lon(), elev(), date, "random"))
    return sites


def sun_extreme(lat, lon, elev, date, kind):
    """The Sun's lowest or highest altitude in the window: 10-minute samples, then golden section."""
    s = Site(lat, lon, elev, date, "")
    x = np.arange(0.0, WINDOW_S + 1.0, 600.0)
    f = s.sun_alt(x)
    i = int(np.argmin(f) if kind == "min" else np.argmax(f))
    i = min(max(i, 1), len(x) - 2)
    _, v = golden_extrema(s.sun_alt, [x[i - 1]], [x[i + 1]], [1.0 if kind == "min" else -1.0], iters=32)
    return float(v[0])


def tune_latitude(lat0, lon, elev, date, kind, target):
    """Secant iteration on latitude so that the Sun's window extreme equals target."""
    a, b = lat0, lat0 + 0.05
    fa, fb = sun_extreme(a, lon, elev, date, kind) - target, sun_extreme(b, lon, elev, date, kind) - target
    for _ in range(8):
        if fb == fa:
            break
        c = b - fb * (b - a) / (fb - fa)
        a, fa = b, fb
        b, fb = c, sun_extreme(round(c, 6), lon, elev, date, kind) - target
        if abs(fb) < 2e-6:
            break
    return b


def fmt_ms(ms):
    if ms is None:
        return ""
    ms = int(round(ms / 100.0)) * 100
    d = rc.ms_to_datetime(ms)
    return d.strftime("%Y-%m-%dT%H:%M:%S") + ".%dZ" % ((ms % 1000) // 100)


CONVENTIONS = [
    "instants: RFC 3339 UTC; events rounded to 0.1 s; UT1 = UTC, polar motion zero; TT = UTC + TAI-UTC (ERFA) + 32.184 s",
    "site: geodetic lat/lon (east positive), height on the WGS84 ellipsoid; altitudes are topocentric, geometric (no refraction, pressure 0)",
    "window: from local mean-solar noon of date (12:00 UTC - lon_deg/15 h, to the ms) to 24 h later; each event = FIRST crossing of its kind in the window, empty = none",
    "sunset/sunrise: Sun centre at -0.8333 deg; civil/nautical/astronomical dusk (descending) and dawn (ascending): Sun centre at -6/-12/-18 deg",
    "moonrise (ascending)/moonset (descending): topocentric Moon centre at -34 arcmin minus topocentric semidiameter asin(1737.4 km / topocentric distance)",
    "method: astropy altitudes sampled every 120 s, extrema within 0.05 deg of a threshold refined by golden section, every sign change bisected to 0.01 s",
    "sun_alt_min_deg/sun_alt_max_deg: the Sun centre's lowest/highest geometric altitude in the window; moon_margin_min/max_deg: lowest/highest (Moon altitude - moonrise altitude)",
    "Sun: erfa.epv00, Moon: erfa.moon98 (~3 arcsec RMS, ~18 arcsec worst) via astropy's builtin ephemeris",
    "pyephem_*: PyEphem next_setting/next_rising from the window start, use_center=True, pressure 0, same horizons (Moon: -34' - its radius at the event, iterated), TT forced; empty if none in the window",
]


def main():
    sites = make_sites()
    for s in sites:  # "24 h later" is unambiguous only without a leap second in the window
        assert rc.tai_minus_utc(s.start_ms) == rc.tai_minus_utc(s.start_ms + int(WINDOW_S * 1000)), s.date
    rows = []
    for k, s in enumerate(sites):
        first, sun_ext, moon_ext, counts = solve_site(s)
        pe = pyephem_events(s)
        rows.append((s, first, sun_ext, moon_ext, counts, pe))
        print("%2d %8.4f %s %s" % (k, s.lat, s.date, " ".join("%s:%d" % (c[:6], counts[c]) for c in EVENT_COLS)),
              flush=True)
    path = os.path.join(HERE, "night_cases.csv")
    names = (["lat_deg", "lon_deg", "elev_m", "date", "window_start_utc", "window_end_utc"] + EVENT_COLS
             + ["sun_alt_min_deg", "sun_alt_max_deg", "moon_margin_min_deg", "moon_margin_max_deg", "case"]
             + ["pyephem_" + c for c in EVENT_COLS])
    with open(path, "w") as f:
        for line in rc.header_lines("nightloom ephem reference table: night events (night_cases.csv)",
                                    "testdata/ephem/gen_night.py", CONVENTIONS):
            f.write(line + "\n")
        f.write(",".join(names) + "\n")
        for s, first, sun_ext, moon_ext, counts, pe in rows:
            start = s.start_ms
            vals = ["%.6f" % s.lat, "%.6f" % s.lon, "%.1f" % s.elev, s.date.isoformat(), rc.rfc3339_ms(start),
                    rc.rfc3339_ms(start + int(WINDOW_S * 1000))]
            vals += [fmt_ms(None if first[c] is None else start + first[c] * 1000.0) for c in EVENT_COLS]
            vals += ["%.6f" % sun_ext[0], "%.6f" % sun_ext[1], "%.6f" % moon_ext[0], "%.6f" % moon_ext[1], s.case]
            vals += [fmt_ms(pe[c]) for c in EVENT_COLS]
            assert not any("," in v or '"' in v for v in vals), vals
            f.write(",".join(vals) + "\n")

    # ---- statistics
    lines = ["night_cases.csv: sampled+bisected astropy events (primary) minus PyEphem next_setting/next_rising, %d rows"
             % len(rows)]
    n_high = sum(1 for s, *_ in rows if 60 <= abs(s.lat) <= 69)
    lines.append("rows with 60 <= |lat| <= 69: %d" % n_high)
    for c in EVENT_COLS:
        diffs, mism = [], []
        for s, first, sun_ext, moon_ext, counts, pe in rows:
            ours = None if first[c] is None else s.start_ms + first[c] * 1000.0
            if ours is not None and pe[c] is not None:
                diffs.append((ours - pe[c]) / 1000.0)
            elif (ours is None) != (pe[c] is None):
                mism.append("%s lat %.4f %s (ours %s, PyEphem %s)" % (c, s.lat, s.date, fmt_ms(ours) or "none",
                                                                    fmt_ms(pe[c]) or "none"))
        empty = sum(1 for r in rows if r[1][c] is None)
        lines.append("%s: %d rows without the event; time difference (s) %s; presence mismatches %d"
                     % (c, empty, rc.stats(diffs), len(mism)))
        for m in mism:
            lines.append("    " + m)
    multi = sum(1 for r in rows for c in EVENT_COLS if r[4][c] > 1)
    lines.append("event columns with more than one crossing of the kind in the window (first one kept): %d" % multi)
    with open(os.path.join(HERE, "crosscheck_night.txt"), "w") as f:
        f.write("\n".join(lines) + "\n")
    print("\n".join(lines))
    print("wrote %s (%d rows)" % (path, len(rows)))


if __name__ == "__main__":
    sys.exit(main())
