#!/usr/bin/python3
"""The grid a user would script with astropy instead of nightloom's constraints.NewGrid.

Same shape as constraints.BenchmarkNightGrid: 1000 fixed ICRS targets (RA uniform in [0, 360),
Dec uniform in [-30, 90) deg, seeded) x 720 steps of 60 s from 2026-12-24T17:00Z, seen from an
invented site at 46.52 N 7.41 E, 1410 m, refraction at 1010 hPa and 10 C.  Fully vectorised: one
SkyCoord of shape (1000, 1) transformed to one AltAz frame of 720 instants, giving (1000, 720).

Modes (what is compared; nightloom's grid does strictly more work in each):
  no-sky  apparent alt/az of every cell and the Kasten & Young (1989) airmass.
          nightloom's no-sky grid also computes hour angle, declination, Moon and Sun
          separations for every cell and evaluates a full constraint set.
  sky     the above, plus the Sun and the Moon in the same frame at every instant, both
          separations for every cell, and the Krisciunas & Schaefer (1991, PASP 103, 1033)
          moonlight + dark-sky brightness in V mag/arcsec^2 for every cell (nightloom adds a
          twilight term and the constraint evaluation).

Offline: Earth orientation UT1 = UTC and zero polar motion (testdata/ephem/ref_common.py), so
no IERS download.  Prints one line per mode: "astropy <mode> wall-ms <median> cpu-ms <median>".

    /usr/bin/python3 testdata/bench/astropy_grid.py [--repeat 5]
"""

import argparse
import os
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "ephem"))
import ref_common as rc  # noqa: E402  (IERS set-up, warnings off, builtin ephemeris)
from ref_common import AltAz, EarthLocation, SkyCoord, Time, get_body, u  # noqa: E402
from astropy.coordinates import get_sun  # noqa: E402

N_TARGETS = 1000
N_STEPS = 720
STEP_S = 60.0
K_V = 0.2  # V extinction per airmass (K&S 1991's 0.172 rounded; the cost does not depend on it)
DARK_MAG = 21.5


def kasten_young(alt_rad):
    """Kasten & Young (1989) relative optical airmass; inf below the horizon."""
    h = np.degrees(alt_rad)
    with np.errstate(invalid="ignore", divide="ignore"):
        x = 1.0 / (np.sin(alt_rad) + 0.50572 * np.power(np.maximum(h + 6.07995, 1e-9), -1.6364))
    return np.where(h > -1.0, x, np.inf)


def unit(alt, az):
    ca = np.cos(alt)
    return np.stack([ca * np.cos(az), ca * np.sin(az), np.sin(alt)], axis=-1)


def ks_scatter(rho_deg):
    """K&S 1991 eq. 21: Rayleigh + Mie scattering function f(rho)."""
    r = np.radians(rho_deg)
    return 10 ** 5.36 * (1.06 + np.cos(r) ** 2) + 10 ** (6.15 - rho_deg / 40.0)


def ks_airmass(alt_rad):
    """K&S 1991 eq. 3."""
    z = np.pi / 2 - np.maximum(alt_rad, 0.0)
    return 1.0 / np.sqrt(1.0 - 0.96 * np.sin(z) ** 2)


def grid(coords, frame, sky):
    aa = coords.transform_to(frame)
    alt = aa.alt.rad
    az = aa.az.rad
    x = kasten_young(alt)
    out = [alt, az, x]
    if sky:
        sun = get_sun(frame.obstime).transform_to(frame)
        moon = get_body("moon", frame.obstime, frame.location).transform_to(frame)
        t = unit(alt, az)  # (1000, 720, 3)
        su = unit(sun.alt.rad, sun.az.rad)  # (720, 3)
        mu = unit(moon.alt.rad, moon.az.rad)
        sun_sep = np.degrees(np.arccos(np.clip(np.einsum("ijk,jk->ij", t, su), -1, 1)))
        moon_sep = np.degrees(np.arccos(np.clip(np.einsum("ijk,jk->ij", t, mu), -1, 1)))
        # Moon phase angle from the Sun-Moon elongation (K&S eq. 20 takes alpha in degrees).
        elong = np.arccos(np.clip(np.sum(su * mu, axis=-1), -1, 1))
        alpha = np.degrees(np.pi - elong)
        istar = 10 ** (-0.4 * (3.84 + 0.026 * np.abs(alpha) + 4e-9 * alpha ** 4))
        xm = ks_airmass(moon.alt.rad)
        xt = ks_airmass(alt)
        b_moon = ks_scatter(moon_sep) * istar * 10 ** (-0.4 * K_V * xm) * (1 - 10 ** (-0.4 * K_V * xt))
        b_moon = np.where(moon.alt.rad > 0, b_moon, 0.0)
        b0 = 34.08 * np.exp(20.7233 - 0.92104 * DARK_MAG)  # nanolamberts
        b_dark = b0 * 10 ** (-0.4 * K_V * (xt - 1)) * xt
        b = b_moon + b_dark
        sky_mag = (20.7233 - np.log(b / 34.08)) / 0.92104
        out += [sun_sep, moon_sep, sky_mag]
    return out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    ra = rng.uniform(0.0, 360.0, 1000)
    dec = -30.0 + rng.uniform(0.0, 120.0, 1000)
    loc = EarthLocation.from_geodetic(7.41 * u.deg, 46.52 * u.deg, 1410 * u.m)
    times = Time("2026-12-24T17:00:00", scale="utc") + np.arange(N_STEPS) * STEP_S * u.s
    frame = AltAz(obstime=times, location=loc, pressure=1010 * u.hPa, temperature=10 * u.deg_C,
                  relative_humidity=0.0, obswl=0.55 * u.micron)
    coords = SkyCoord(ra[:, None] * u.deg, dec[:, None] * u.deg, frame="icrs")
    print("astropy", rc.astropy.__version__, "numpy", np.__version__, "python", sys.version.split()[0],
          file=sys.stderr)
    for mode, sky in (("sky", True), ("no-sky", False)):
        grid(coords, frame, sky)  # warm up caches (first transform builds the graph)
        walls, cpus = [], []
        for _ in range(args.repeat):
            w0, c0 = time.perf_counter(), time.process_time()
            res = grid(coords, frame, sky)
            cpus.append((time.process_time() - c0) * 1e3)
            walls.append((time.perf_counter() - w0) * 1e3)
        assert res[0].shape == (1000, N_STEPS), res[0].shape
        print(f"astropy {mode} wall-ms {statistics.median(walls):.1f} cpu-ms {statistics.median(cpus):.1f}")


if __name__ == "__main__":
    main()
