#!/usr/bin/python3
"""Print a short human summary of seatilt `currents` output files.

    /usr/bin/python3 scripts/summarize.py OUT_currents.nc [...] [--time K]

For each file: the settings recorded in its global attributes, then the
range of u, v, speed (min, max, 1st/99th percentile of the valid cells),
vorticity and its ratio to the local Coriolis parameter |zeta|/|f|
(Rossby number; outside |lat| < 5 degrees where f -> 0), and the share of
cells carrying each quality flag bit (names from the file's flag_meanings)
and any flag at all. f = 2 Omega sin(lat), Omega = 7.292115e-5 rad s-1
(Groten 2004; REFERENCES.md section 4).
"""

from __future__ import annotations

import argparse
import sys

import numpy as np

try:
    import netCDF4
except ImportError as exc:  # pragma: no cover
    sys.stderr.write(f"summarize.py: needs netCDF4; run it with /usr/bin/python3 ({exc})\n")
    raise

OMEGA = 7.292115e-5   # rad s-1


def _values(ds, name, time_index):
    """Float64 values of NAME at TIME_INDEX (all steps when None) with NaN for fill."""
    v = ds.variables[name]
    a = v[:] if time_index is None or "time" not in v.dimensions else v[time_index]
    return np.ma.filled(np.ma.asarray(a, dtype=np.float64), np.nan)


def _lat_of(ds, var):
    """Latitude broadcast to VAR's shape (degrees), found by CF units."""
    for dim in var.dimensions:
        c = ds.variables.get(dim)
        if c is not None and getattr(c, "units", "") in ("degrees_north", "degree_north", "degrees_N"):
            shape = [1] * len(var.dimensions)
            shape[var.dimensions.index(dim)] = -1
            return np.asarray(c[:], dtype=np.float64).reshape(shape)
    return None


def _range_line(label, a, units, scale=1.0, fmt="{:+.3f}"):
    ok = a[np.isfinite(a)] * scale
    if ok.size == 0:
        return f"  {label:<11} no valid cells"
    p1, p99 = np.percentile(ok, [1, 99])
    f = fmt.format
    return (f"  {label:<11} min {f(ok.min())}  p1 {f(p1)}  p99 {f(p99)}  max {f(ok.max())}  {units}")


def summarize(path: str, time_index=None, out=sys.stdout) -> None:
    with netCDF4.Dataset(path) as ds:
        g = {k: ds.getncattr(k) for k in ds.ncattrs()}
        print(f"{path}", file=out)
        if "title" in g:
            print(f"  title       {g['title']}", file=out)
        settings = [f"{k.replace('geostrophy_', '')}={g[k]}" for k in
                    ("geostrophy_stencil_order", "geostrophy_equator_method",
                     "geostrophy_equator_band_deg", "geostrophy_coast_method",
                     "geostrophy_earth_model", "geostrophy_gravity") if k in g]
        if settings:
            print(f"  settings    {', '.join(settings)}", file=out)
        if "input_height_variable" in g:
            print(f"  input       {g['input_height_variable']} ({g.get('input_height_kind', '?')})",
                  file=out)
        if "u" in ds.variables:
            shape = ds.variables["u"].shape
            print(f"  cells       {' x '.join(map(str, shape))}"
                  + ("" if time_index is None else f"  (time step {time_index})"), file=out)

        for name, label, units in (("u", "u", "m s-1"), ("v", "v", "m s-1"),
                                   ("speed", "speed", "m s-1")):
            if name in ds.variables:
                print(_range_line(label, _values(ds, name, time_index), units), file=out)

        if "vorticity" in ds.variables:
            zeta = _values(ds, "vorticity", time_index)
            print(_range_line("vorticity", zeta, "1e-5 s-1", 1e5, "{:+.2f}"), file=out)
            lat = _lat_of(ds, ds.variables["vorticity"])
            if lat is not None:
                if time_index is not None and "time" in ds.variables["vorticity"].dimensions:
                    lat = lat[0]
                f = 2.0 * OMEGA * np.sin(np.radians(lat))   # Coriolis parameter, s-1
                with np.errstate(divide="ignore", invalid="ignore"):
                    ro = np.where(np.abs(lat) >= 5.0, np.abs(zeta) / np.abs(f), np.nan)
                ok = ro[np.isfinite(ro)]
                if ok.size:
                    p50, p99 = np.percentile(ok, [50, 99])
                    print(f"  |zeta|/|f|  median {p50:.3f}  p99 {p99:.3f}  max {ok.max():.3f}"
                          "  (|lat| >= 5)", file=out)

        if "quality" in ds.variables:
            qv = ds.variables["quality"]
            q = np.ma.getdata(qv[:] if time_index is None or "time" not in qv.dimensions
                              else qv[time_index]).astype(np.int64) & 0xFF
            masks = [int(m) for m in np.atleast_1d(getattr(qv, "flag_masks", []))]
            meanings = str(getattr(qv, "flag_meanings", "")).split()
            total = q.size
            print(f"  quality     any flag {100.0 * np.count_nonzero(q) / total:.2f} % of "
                  f"{total} cells", file=out)
            for m, name in zip(masks, meanings):
                share = 100.0 * np.count_nonzero(q & m) / total
                print(f"    bit {m:>3} {name:<24} {share:7.2f} %", file=out)
        print("", file=out)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("files", nargs="+", help="seatilt currents output files")
    ap.add_argument("--time", type=int, default=None, help="only this time step (0-based)")
    a = ap.parse_args(argv)
    status = 0
    for path in a.files:
        try:
            summarize(path, a.time)
        except (OSError, KeyError, IndexError) as exc:
            print(f"summarize.py: {path}: {exc}", file=sys.stderr)
            status = 1
    return status


if __name__ == "__main__":
    sys.exit(main())
