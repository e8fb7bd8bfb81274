#!/usr/bin/python3
"""What an analyst would write instead of `seatilt currents`: a straightforward
vectorised numpy + netCDF4-python script (Debian packages) computing the same
nine fields with the same output layout and compression, for scripts/bench.

Method (as seatilt's defaults where a simple script can follow them):
  u = -(g / (f M)) d(eta)/d(phi),  v = (g / (f N cos phi)) d(eta)/d(lambda)
  zeta = dv/dx - du/dy + u tan(phi)/N, sn = du/dx - dv/dy - v tan(phi)/N,
  ss = dv/dx + du/dy + u tan(phi)/N, strain = hypot(sn, ss),
  W = sn^2 + ss^2 - zeta^2, speed = hypot(u, v)
with d/dx = 1/(N cos phi) d/dlambda, d/dy = 1/M d/dphi, 3-point centred
differences (periodic in longitude), WGS84 radii of curvature M, N (NIMA
TR8350.2), g = 9.80665 m s-2, Omega = 7.292115e-5 rad s-1 (REFERENCES.md
section 4). Simplifications a script would make: |lat| < 5 degrees masked
(no beta plane), cells next to missing ones become missing (no one-sided
stencils). Output: float32 with _FillValue 9.96921e36, quality byte flags
(8 missing height, 16 equator band), chunks (1, ceil(262144/nx), nx),
deflate with shuffle.

  numpy_currents.py [--deflate N] -o OUTDIR IN.nc...
Output: OUTDIR/<input name without .nc>_numpy.nc. Benchmark helper only.
"""

import argparse
import os
import sys

import netCDF4
import numpy as np

G = 9.80665                  # m s-2, standard gravity (3rd CGPM 1901)
OMEGA = 7.292115e-5          # rad s-1 (Groten 2004)
A = 6378137.0                # m, WGS84 semi-major axis (NIMA TR8350.2)
E2 = (1 / 298.257223563) * (2 - 1 / 298.257223563)
FILL = np.float32(9.96921e36)


def height_variable(ds):
    for name, var in ds.variables.items():
        if getattr(var, "standard_name", "").startswith("sea_surface_height"):
            return name
    raise SystemExit("no sea_surface_height variable")


def fields(eta, lat, lon):
    """Returns a dict of the nine output arrays for one (ny, nx) height field (m, NaN missing)."""
    phi = np.radians(lat)[:, None]
    lam = np.radians(lon)
    s, c = np.sin(phi), np.cos(phi)
    w = np.sqrt(1.0 - E2 * s * s)
    m = A * (1.0 - E2) / w ** 3
    n = A / w
    f = 2.0 * OMEGA * s
    dlam = lam[1] - lam[0]

    def d_lam(x):
        return (np.roll(x, -1, axis=1) - np.roll(x, 1, axis=1)) / (2.0 * dlam)

    def d_phi(x):
        out = np.full_like(x, np.nan)
        out[1:-1] = (x[2:] - x[:-2]) / (phi[2:] - phi[:-2])
        return out

    equator = np.abs(lat)[:, None] < 5.0
    u = -G / (f * m) * d_phi(eta)
    v = G / (f * n * c) * d_lam(eta)
    u = np.where(equator, np.nan, u)
    v = np.where(equator, np.nan, v)
    ux, vx = d_lam(u) / (n * c), d_lam(v) / (n * c)
    uy, vy = d_phi(u) / m, d_phi(v) / m
    t = np.tan(phi) / n
    zeta = vx - uy + u * t
    sn = ux - vy - v * t
    ss = vx + uy + u * t
    quality = np.where(np.isnan(eta), 8, np.where(equator, 16, 0)).astype(np.int8)
    return {"u": u, "v": v, "speed": np.hypot(u, v), "vorticity": zeta, "strain_normal": sn,
            "strain_shear": ss, "strain": np.hypot(sn, ss), "okubo_weiss": sn * sn + ss * ss - zeta * zeta,
            "quality": quality}


def run(path, out_path, deflate):
    with netCDF4.Dataset(path) as src:
        name = height_variable(src)
        h = src.variables[name]
        lat = src.variables["lat"][:].astype(np.float64)
        lon = src.variables["lon"][:].astype(np.float64)
        time = src.variables["time"]
        nt, ny, nx = h.shape
        rows = min(ny, -(-262144 // nx))
        with netCDF4.Dataset(out_path, "w", format="NETCDF4") as dst:
            dst.createDimension("time", None)
            dst.createDimension("lat", ny)
            dst.createDimension("lon", nx)
            for cname, values, src_var in (("time", time[:], time), ("lat", lat, src.variables["lat"]),
                                           ("lon", lon, src.variables["lon"])):
                cv = dst.createVariable(cname, "f8", (cname,))
                cv.setncatts({k: src_var.getncattr(k) for k in src_var.ncattrs() if k != "_FillValue"})
                cv[:] = values
            out = {}
            for k in ("u", "v", "speed", "vorticity", "strain_normal", "strain_shear", "strain",
                      "okubo_weiss", "quality"):
                flag = k == "quality"
                out[k] = dst.createVariable(k, "i1" if flag else "f4", ("time", "lat", "lon"),
                                            zlib=deflate > 0, complevel=max(deflate, 1), shuffle=True,
                                            chunksizes=(1, rows, nx),
                                            fill_value=None if flag else FILL)
                out[k].set_auto_maskandscale(False)
            for t in range(nt):
                eta = np.ma.filled(h[t].astype(np.float64), np.nan)
                for k, values in fields(eta, lat, lon).items():
                    if k == "quality":
                        out[k][t] = values
                    else:
                        out[k][t] = np.where(np.isfinite(values), values, FILL).astype(np.float32)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.partition("\n\n")[0])
    ap.add_argument("inputs", nargs="+")
    ap.add_argument("-o", dest="outdir", required=True)
    ap.add_argument("--deflate", type=int, default=1)
    a = ap.parse_args(argv)
    for path in a.inputs:
        base = os.path.basename(path)
        base = base[:-3] if base.endswith(".nc") else base
        run(path, os.path.join(a.outdir, base + "_numpy.nc"), a.deflate)
    return 0


if __name__ == "__main__":
    sys.exit(main())
