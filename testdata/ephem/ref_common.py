"""Shared set-up for the ephem reference-table generators.

Forces nightloom's conventions on the reference libraries:

* input instants are UTC; TT = UTC + (TAI-UTC from ERFA's leap-second table) + 32.184 s;
* UT1 = UTC (DUT1 = 0) and polar motion zero: astropy is given an Earth-orientation
  table whose UT1-UTC, x_p, y_p and dX/dY columns are all zero from 1968 to 2050, so
  no download is tried and nothing is extrapolated;
* PyEphem: its dates are UT and it adds its own Delta T (libastro's table, extrapolated
  after about 2018).  We hand it a shifted date d such that d + DeltaT_pyephem(d) equals
  the true TT, and we turn the observer's longitude east by the sidereal angle of the
  shift so that its Earth rotation angle corresponds to the true UT1 = UTC.

Run with Debian's /usr/bin/python3 (python3-astropy, python3-erfa, python3-ephem,
python3-numpy, python3-mpmath).
"""

import datetime as _dt
import math
import platform
import warnings

import numpy as np
import erfa
import ephem
import astropy
from astropy import units as u
from astropy.table import QTable
from astropy.utils import iers
from astropy.utils.exceptions import AstropyWarning

# ERFA warns "dubious year" for every UTC date more than a few years after the
# release of its leap-second table.  TAI-UTC stays 37 s after 2017-01-01.
warnings.simplefilter("ignore", erfa.ErfaWarning)
warnings.simplefilter("ignore", AstropyWarning)

iers.conf.auto_download = False
iers.conf.auto_max_age = None

_MJD = np.arange(40000.0, 70001.0, 1.0)  # 1968-05-24 .. 2050-06-24
_Z = np.zeros_like(_MJD)
ZERO_EOP = iers.IERS_B(
    QTable(
        {
            "MJD": _MJD * u.d,
            "UT1_UTC": _Z * u.s,
            "PM_x": _Z * u.arcsec,
            "PM_y": _Z * u.arcsec,
            "dX_2000A": _Z * u.marcsec,
            "dY_2000A": _Z * u.marcsec,
        }
    )
)
iers.earth_orientation_table.set(ZERO_EOP)

from astropy.time import Time, TimeDelta  # noqa: E402  (after the IERS set-up)
from astropy.coordinates import (  # noqa: E402
    AltAz,
    EarthLocation,
    ICRS,
    SkyCoord,
    TETE,
    get_body,
    solar_system_ephemeris,
)

solar_system_ephemeris.set("builtin")  # Sun/Earth: erfa.epv00; Moon: erfa.moon98

AU_KM = 149597870.7
C_AU_PER_DAY = 299792.458 * 86400.0 / AU_KM
MOON_RADIUS_KM = 1737.4  # IAU mean radius
# Earth rotation angle rate (IERS Conventions 2010, eq. 5.15): 1.00273781191135448 rev/UT1 day
ERA_DEG_PER_S = 360.0 * 1.00273781191135448 / 86400.0
DJD_OFFSET = 2415020.0  # PyEphem dates are Dublin Julian Dates (JD - 2415020)
EPOCH_UNIX = _dt.datetime(1970, 1, 1, tzinfo=_dt.timezone.utc)


def versions():
    return {
        "python": platform.python_version(),
        "astropy": astropy.__version__,
        "pyerfa": erfa.__version__,
        "erfa(C)": erfa.version.erfa_version if hasattr(erfa, "version") else "?",
        "sofa": erfa.version.sofa_version if hasattr(erfa, "version") else "?",
        "pyephem": ephem.__version__,
        "numpy": np.__version__,
    }


def versions_line():
    v = versions()
    return ", ".join(f"{k} {val}" for k, val in v.items())


# ---------------------------------------------------------------- time helpers


def ms_to_datetime(ms):
    return EPOCH_UNIX + _dt.timedelta(milliseconds=int(ms))


def datetime_to_ms(d):
    delta = d - EPOCH_UNIX
    return (delta.days * 86400 + delta.seconds) * 1000 + delta.microseconds // 1000


def rfc3339_ms(ms, suffix="Z"):
    """RFC 3339 text of a millisecond count; whole seconds are written without a fraction."""
    d = ms_to_datetime(ms)
    s = d.strftime("%Y-%m-%dT%H:%M:%S")
    if ms % 1000:
        s += ".%03d" % (ms % 1000)
    return s + suffix


def tai_minus_utc(ms):
    """TAI-UTC in seconds (ERFA's leap-second table) for a UTC millisecond count."""
    d = ms_to_datetime(ms)
    fd = (d.hour * 3600 + d.minute * 60 + d.second + d.microsecond * 1e-6) / 86400.0
    return float(erfa.dat(d.year, d.month, d.day, fd))


def tt_minus_utc(ms):
    return tai_minus_utc(ms) + 32.184


def utc_ms_to_time(ms_list):
    """astropy Time (scale utc) from UTC millisecond counts, through exact ISO strings."""
    return Time([rfc3339_ms(m, "") for m in np.atleast_1d(ms_list)], format="isot", scale="utc")


def utc_ms_to_djd(ms):
    """UTC as a Dublin Julian Date (days), leap-second-free count (fine away from a leap second)."""
    return ms / 86400000.0 + (2440587.5 - DJD_OFFSET)


# ---------------------------------------------------------------- PyEphem with TT forced


def pyephem_date(utc_djd, ttmutc_s):
    """PyEphem date d and shift delta (s) such that d + DeltaT_pyephem(d) = UTC + (TT-UTC).

    Returns (d, delta) with delta = DeltaT_pyephem(d) - (TT-UTC) = UTC - d in seconds.
    """
    d = utc_djd
    delta = 0.0
    for _ in range(6):
        delta = ephem.delta_t(d) - ttmutc_s
        d = utc_djd - delta / 86400.0
    return d, delta


def pyephem_observer(lat_deg, lon_deg, elev_m, d, delta_s, horizon_deg=0.0):
    """Observer at PyEphem date d; longitude turned so that its sidereal time is that of the true UT1.

    PyEphem's sidereal time is computed from d taken as UT, which is delta_s earlier than the
    true UTC (= UT1 here), so the Earth has to be turned east by ERA rate * delta_s.
    """
    o = ephem.Observer()
    o.lat = math.radians(lat_deg)
    lon = lon_deg + delta_s * ERA_DEG_PER_S
    lon = (lon + 180.0) % 360.0 - 180.0
    o.lon = math.radians(lon)
    o.elevation = elev_m
    o.pressure = 0.0
    o.temp = 10.0
    o.horizon = math.radians(horizon_deg)
    o.date = d
    return o


# ---------------------------------------------------------------- vectors and formatting


def unit_from_radec(ra_deg, dec_deg):
    ra = np.radians(ra_deg)
    dec = np.radians(dec_deg)
    return np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], axis=-1)


def sep_deg(ra1, dec1, ra2, dec2):
    """Angular separation (deg) with the atan2 form, good at all angles."""
    a = unit_from_radec(ra1, dec1)
    b = unit_from_radec(ra2, dec2)
    cr = np.linalg.norm(np.cross(a, b), axis=-1)
    dt = np.sum(a * b, axis=-1)
    return np.degrees(np.arctan2(cr, dt))


def angle_between(a, b):
    cr = np.linalg.norm(np.cross(a, b), axis=-1)
    dt = np.sum(a * b, axis=-1)
    return np.degrees(np.arctan2(cr, dt))


def stats(values):
    v = np.abs(np.asarray(values, dtype=float))
    v = v[np.isfinite(v)]
    if v.size == 0:
        return "n=0"
    return "n=%d worst %.4g, p95 %.4g, median %.4g" % (
        v.size,
        v.max(),
        np.percentile(v, 95),
        np.median(v),
    )


def header_lines(title, generator, conventions):
    lines = [f"# {title}", f"# generator: {generator} (run: bash testdata/ephem/regen.sh)"]
    lines.append(f"# libraries: {versions_line()}")
    for c in conventions:
        lines.append(f"# {c}")
    return lines
