"""Synthetic daily height files for the climatology end-to-end tests.

Every file holds a sum of two uniform slopes whose amplitudes change from day
to day (an invented scenario, the "Varrow shelf" on a small box away from the
equator):

    eta_t = a_t * S * R1 * (lat - lat0) + b_t * S * R1 * cos(lat0) * (lon - lon0)

(angles in radians, S = 1e-6 rise per metre). eta is linear in latitude and
longitude, so every centred and one-sided difference of it is exact and the
geostrophic velocity on the sphere with standard gravity is, per day,

    u_t = -(g / (f R1)) d(eta)/d(lat) = -a_t g S / f                      (m s-1)
    v_t = (g / (f R1 cos(lat))) d(eta)/d(lon) = b_t g S cos(lat0) / (f cos(lat))

(geostrophic balance on the sphere; make_ssh.geostrophic_uv, Gill 1982 7.6),
with f = 2 Omega sin(lat). Means, variances and covariances over the days are
therefore known in closed form from the numbers a_t, b_t:
mean(u) = mean(a) U, var(u) = var(a) U^2, cov(u, v) = cov(a, b) U V with
U = -g S / f, V = g S cos(lat0) / (f cos(lat)).
"""

from __future__ import annotations

import math
import os
import sys

import numpy as np
import cftime

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import e2e_util  # noqa: E402,F401  (puts scripts/ on sys.path)
import make_ssh  # noqa: E402

S = 1e-6          # rise per metre (1 m per 1000 km)
LAT0, LON0 = 40.0, -30.0


def grid(step=0.5, half=2.0):
    """Latitudes and longitudes (degrees) of the test box."""
    return make_ssh.axis(LAT0 - half, LAT0 + half, step), make_ssh.axis(LON0 - half, LON0 + half, step)


def unit_velocity(lat):
    """(U, V) per unit a, b as 1-D arrays over latitude (m s-1), sphere, g0."""
    lat = np.asarray(lat, dtype=np.float64)
    f = make_ssh.coriolis(lat)
    U = -make_ssh.G0 * S / f
    V = make_ssh.G0 * S * math.cos(math.radians(LAT0)) / (f * np.cos(np.radians(lat)))
    return U, V


def write_days(path, a, b, dates, calendar="standard", units="days since 1990-01-01",
               missing=None, step=0.5, half=2.0):
    """Write one file with len(a) daily maps; DATES are cftime dates of CALENDAR.

    missing: optional boolean array (nt, ny, nx) of cells set to fill (land)."""
    lat, lon = grid(step, half)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    nt = len(a)
    eta = np.empty((nt, lat.size, lon.size))
    for k in range(nt):
        eta[k] = (a[k] * S * make_ssh.R1 * np.radians(la - LAT0)
                  + b[k] * S * make_ssh.R1 * math.cos(math.radians(LAT0)) * np.radians(lo - LON0))
    if missing is not None:
        eta = np.where(missing, np.nan, eta)
    fld = make_ssh.SshField(lat, lon, eta, list(dates), kind="anomaly",
                            title="synthetic shelf slopes (invented Varrow shelf)")
    make_ssh.write_ssh(path, fld, dtype="f8", time_units=units, calendar=calendar)
    return path


def daily_dates(start, n, calendar):
    """N consecutive days from START = (y, m, d) in CALENDAR (cftime dates)."""
    units = "days since %04d-%02d-%02d" % tuple(start)
    return list(cftime.num2date(np.arange(n, dtype=np.float64), units, calendar=calendar))
