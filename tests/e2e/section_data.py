"""Inputs and reference values for the `seatilt section` end-to-end tests.

Fields are written by the project's generator (scripts/make_ssh.py); the
scenarios are invented (the Tessaline Sea shelf). Reference values come from
closed forms of surface geostrophy (Stewart, Introduction to Physical
Oceanography, ch. 10), published constants (REFERENCES.md section 4) and
GeographicLib check values (REFERENCES.md section 7).
"""

from __future__ import annotations

import csv
import datetime as dt
import math

import numpy as np

from e2e_util import make_ssh

G0 = make_ssh.G0            # m s-2, standard gravity (3rd CGPM 1901)
R1 = make_ssh.R1            # m, IUGG mean radius (Moritz 2000)
CSV_COLUMNS = ["time", "section", "length_m", "transport_per_depth_m2s",
               "mean_normal_velocity_ms", "excluded_fraction"]          # DESIGN.md "Other outputs"
CSV_DEPTH_COLUMNS = CSV_COLUMNS + ["transport_m3s", "transport_sv"]


def coriolis(lat_deg):
    """f = 2 Omega sin(lat) (s-1), Omega = 7.292115e-5 rad s-1 (Groten 2004)."""
    return float(make_ssh.coriolis(lat_deg))


def field(lat, lon, eta_fn, times=None, land=None, title="invented Tessaline shelf"):
    """An SshField with eta = ETA_FN(lat2d, lon2d, step) (m) per time step.

    TIMES: list of datetimes (default one step on 2031-04-14). LAND(lat2d, lon2d)
    returns a boolean mask of land cells (NaN)."""
    lat = np.asarray(lat, float)
    lon = np.asarray(lon, float)
    times = times or [dt.datetime(2031, 4, 14)]
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    eta = np.stack([eta_fn(la, lo, k) for k in range(len(times))])
    if land is not None:
        eta[:, land(la, lo)] = np.nan
    return make_ssh.SshField(lat, lon, eta, times, title=title)


def write(path, fld, **kw):
    return make_ssh.write_ssh(str(path), fld, **kw)


def read_csv(path):
    """Return (header, rows as dicts) of a section CSV."""
    with open(path, newline="") as fh:
        rd = csv.reader(fh)
        header = next(rd)
        rows = [dict(zip(header, r)) for r in rd]
    return header, rows


def value(row, key):
    return float(row[key])


def zonal_slope_eta(lon0, rise_per_deg):
    """eta = RISE_PER_DEG * (lon - LON0) (m): linear in longitude, so bilinear
    interpolation is exact and d(eta) between two points is known in closed form."""
    return lambda la, lo, k: rise_per_deg * (lo - lon0)


def deg_for_km_at(lat_deg, km):
    """Longitude span (deg) of KM along a parallel of the R1 sphere."""
    return km * 1e3 / (R1 * math.cos(math.radians(lat_deg))) / math.radians(1.0)
