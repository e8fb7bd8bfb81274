#!/usr/bin/python3
"""Benchmark inputs for scripts/bench: global sea level anomaly maps of the
invented ocean planet Meridra (no real coastline, basin or product imitated).

Content, chosen to compress and to differentiate like altimetry maps:
  - gyre-scale anomalies (+-15 cm) and a circumpolar band (-10 cm),
  - an equatorial bump (6 cm, 300 km wide),
  - N_EDDIES Gaussian eddies of both signs (5-25 cm, radii 40-110 km, weaker
    toward the equator so that |zeta|/f stays O(0.1)), drifting westward
    ~4 km/day (REFERENCES.md section 5 magnitudes),
  - invented continents (the Harrow Shelf, Quell, the Tandem Isles, the
    southern Ice Reach) and scattered islands as fill.
Files are netCDF-4, float32 metres with _FillValue, time unlimited, deflate
level 4 with shuffle on netCDF-C's default chunks (what typical producers
ship; common practice, no source).

Usage (also importable):
  bench_data.py OUT.nc --step 0.25 [--day K] [--seed S]
"""

from __future__ import annotations

import argparse
import datetime as _dt
import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import make_ssh  # noqa: E402  (constants, grids and the writer's conventions)

import netCDF4  # noqa: E402
import cftime  # noqa: E402

N_EDDIES = 2500
START = _dt.datetime(2033, 1, 1)


def _land(la, lo):
    """Boolean land mask of Meridra on a (lat, lon) mesh in degrees."""
    blobs = [(35.0, 40.0, 24.0), (5.0, 60.0, 12.0), (-25.0, 150.0, 20.0), (20.0, 200.0, 9.0),
             (45.0, 285.0, 22.0), (10.0, 300.0, 14.0), (-40.0, 330.0, 10.0)]
    landness = np.zeros_like(la)
    for lat0, lon0, r in blobs:
        landness += np.exp(-(make_ssh._angular_distance_deg(la, lo, lat0, lon0) / r) ** 2)
    landness += 0.12 * np.sin(np.radians(5 * lo)) * np.cos(np.radians(3 * la))
    land = landness > 0.5
    land |= la < -72.0 + 3.0 * np.sin(np.radians(2 * lo))          # the Ice Reach
    land |= la > 84.0                                               # polar shelf ice
    rng = np.random.default_rng(99)                                 # the Tandem Isles etc.
    for _ in range(40):
        lat0, lon0, r = rng.uniform(-60, 70), rng.uniform(0, 360), rng.uniform(0.3, 1.5)
        near = (np.abs(la - lat0) < r) & (np.abs(make_ssh.wrap180(lo - lon0)) < r / max(
            0.2, math.cos(math.radians(lat0))))
        land |= near
    return land


def _stamp_eddies(eta, lat, lon, step, eddies):
    """Adds Gaussian eddies (lat0, lon0, amp m, radius m) to ETA in place,
    each on a window of +-5 radii (exp(-25) ~ 1e-11 relative beyond)."""
    ny, nx = eta.shape
    for lat0, lon0, amp, rad in eddies:
        reach_lat = math.degrees(5.0 * rad / make_ssh.R1)
        reach_lon = reach_lat / max(0.05, math.cos(math.radians(lat0)))
        j0 = max(0, int((lat0 - reach_lat - lat[0]) / step))
        j1 = min(ny, int((lat0 + reach_lat - lat[0]) / step) + 2)
        if j1 <= j0:
            continue
        half = min(nx // 2, int(reach_lon / step) + 2)
        ic = int(round((lon0 - lon[0]) / step))
        cols = np.arange(ic - half, ic + half + 1) % nx
        la = lat[j0:j1, None]
        lo = lon[None, cols]
        x = make_ssh.R1 * math.cos(math.radians(lat0)) * np.radians(make_ssh.wrap180(lo - lon0))
        y = make_ssh.R1 * np.radians(la - lat0)
        eta[j0:j1, cols] += amp * np.exp(-(x * x + y * y) / rad ** 2)


def meridra(step=0.25, day=0, seed=7):
    """Returns (lat, lon, eta (ny, nx) with NaN on land, date) for DAY."""
    lat = make_ssh.global_lat_centres(step)
    lon = make_ssh.global_lon(step, 0.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    phi, lam = np.radians(la), np.radians(lo)
    eta = (0.15 * np.sin(2 * phi) ** 2 * np.cos(2 * lam - 0.02 * day) * np.cos(phi)
           + 0.08 * np.sin(3 * phi) * np.sin(lam + 0.3)
           - 0.10 * np.exp(-((la + 52.0) / 7.0) ** 2)
           + 0.06 * np.exp(-(make_ssh.R1 * phi / 300e3) ** 2) * np.cos(lam - 0.05 * day))
    rng = np.random.default_rng(seed)
    eddies = []
    for k in range(N_EDDIES):
        lat0 = rng.choice([-1.0, 1.0]) * rng.uniform(8.0, 68.0)
        weak = min(1.0, (math.sin(math.radians(abs(lat0))) / math.sin(math.radians(40.0))) ** 2)
        rad = rng.uniform(40e3, 110e3)
        drift = rng.uniform(2.0, 6.0) * 1e3 * day          # m westward
        lon0 = (rng.uniform(0.0, 360.0)
                - math.degrees(drift / (make_ssh.R1 * math.cos(math.radians(lat0))))) % 360.0
        eddies.append((lat0, lon0, (1.0 if k % 2 else -1.0) * weak * rng.uniform(0.05, 0.25), rad))
    _stamp_eddies(eta, lat, lon, step, eddies)
    eta[_land(la, lo)] = np.nan
    return lat, lon, eta, START + _dt.timedelta(days=day)


def write(path, step=0.25, day=0, seed=7, complevel=4):
    """Writes one daily Meridra map to PATH (see the module docstring)."""
    lat, lon, eta, date = meridra(step, day, seed)
    return write_map(path, lat, lon, eta, date, complevel)


def write_year(folder, base_paths, days=365, complevel=4):
    """Writes DAYS daily maps folder/dayNNN.nc for a climatology benchmark,
    cheaply: day d mixes two of the BASE_PATHS maps (0.7 and 0.3) and adds a
    seasonal cycle of 4 cm (sin of latitude, one year period), so that every
    month differs while land stays the same. Existing files are kept."""
    base = []
    for p in base_paths:
        with netCDF4.Dataset(p) as ds:
            v = ds["sla"]
            v.set_auto_maskandscale(False)
            eta = v[0].astype("f8")
            eta[eta == make_ssh.FLOAT32_FILL] = np.nan
            base.append(eta)
            lat, lon = ds["lat"][:].data, ds["lon"][:].data
    sin_phi = np.sin(np.radians(lat))[:, None]
    os.makedirs(folder, exist_ok=True)
    paths = []
    for d in range(days):
        path = os.path.join(folder, f"day{d + 1:03d}.nc")
        paths.append(path)
        if os.path.exists(path):
            continue
        a, b = base[d % len(base)], base[(7 * d + 3) % len(base)]
        eta = 0.7 * a + 0.3 * b + 0.04 * math.sin(2 * math.pi * d / 365.0) * sin_phi
        write_map(path, lat, lon, eta, START + _dt.timedelta(days=d), complevel)
    return paths


def write_map(path, lat, lon, eta, date, complevel=4):
    """Writes one map ETA (ny, nx; NaN on land) of DATE to PATH atomically."""
    tmp = path + ".part"
    ds = netCDF4.Dataset(tmp, "w", format="NETCDF4")
    try:
        ds.createDimension("time", None)
        ds.createDimension("lat", lat.size)
        ds.createDimension("lon", lon.size)
        tv = ds.createVariable("time", "f8", ("time",))
        tv.standard_name, tv.units, tv.calendar, tv.axis = ("time", make_ssh.TIME_UNITS,
                                                             make_ssh.CALENDAR, "T")
        tv[:] = cftime.date2num([date], make_ssh.TIME_UNITS, make_ssh.CALENDAR)
        for name, values, units, axis in (("lat", lat, "degrees_north", "Y"),
                                          ("lon", lon, "degrees_east", "X")):
            v = ds.createVariable(name, "f8", (name,))
            v.standard_name = "latitude" if name == "lat" else "longitude"
            v.units, v.axis = units, axis
            v[:] = values
        fill = make_ssh.FLOAT32_FILL
        h = ds.createVariable("sla", "f4", ("time", "lat", "lon"), fill_value=fill,
                              zlib=complevel > 0, complevel=max(complevel, 1), shuffle=True)
        h.set_auto_maskandscale(False)
        h.standard_name = make_ssh.STD_ANOMALY
        h.long_name = "sea level anomaly"
        h.units = "m"
        h[0] = np.where(np.isfinite(eta), eta, fill).astype("f4")
        ds.Conventions = "CF-1.12"
        ds.title = "Meridra synthetic sea level anomaly (benchmark input)"
        ds.source = "seatilt scripts/bench_data.py (invented planet Meridra)"
        ds.scenario = "Meridra (invented)"
    finally:
        ds.close()
    os.replace(tmp, path)
    return path


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.partition("\n\n")[0])
    ap.add_argument("out")
    ap.add_argument("--step", type=float, default=0.25)
    ap.add_argument("--day", type=int, default=0)
    ap.add_argument("--seed", type=int, default=7)
    a = ap.parse_args(argv)
    write(a.out, a.step, a.day, a.seed)
    return 0


if __name__ == "__main__":
    sys.exit(main())
