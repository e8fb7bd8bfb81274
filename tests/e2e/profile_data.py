#!/usr/bin/python3
"""Synthetic hydrography (and matching heights) for the `seatilt profile` tests.

Every scenario is invented: the Verrand Basin, a mid-latitude box of the
northern hemisphere with a warm, salty west and a cold, fresh east, a
shelf on its eastern side, and a sea surface that rises toward the south
(an eastward surface jet). Nothing imitates a real basin or product.

Formulas used by the tests (z positive up, sphere of radius R1):
  thermal wind  du/dz = (g/(rho0 f)) drho/dy,  dv/dz = -(g/(rho0 f)) drho/dx
  surface       u_s = -(g/(f R)) deta/dphi,    v_s = (g/(f R cos phi)) deta/dlambda
  rho' = rho(SA, CT, p) - rho(SSO, 0, p)   (TEOS-10 via python3-gsw)
Constants: make_ssh.py (REFERENCES.md section 4); rho0 = 1025 kg m-3 (seatilt default).
"""

from __future__ import annotations

import datetime as _dt
import os
import sys

import numpy as np
import netCDF4
import gsw

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "scripts"))
import make_ssh  # noqa: E402  (the project's height generator)

R1 = make_ssh.R1
G0 = make_ssh.G0
OMEGA = make_ssh.OMEGA
RHO0 = 1025.0
SSO = 35.16504          # g/kg, TEOS-10 Standard Ocean Reference Salinity
FILL = np.float32(9.96921e36)

STD = {
    "ct": ("sea_water_conservative_temperature", "degC"),
    "pt": ("sea_water_potential_temperature", "degC"),
    "t": ("sea_water_temperature", "degC"),
    "sa": ("sea_water_absolute_salinity", "g kg-1"),
    "sp": ("sea_water_practical_salinity", "1"),
    "rho": ("sea_water_density", "kg m-3"),
}


def grid(lat0=30.0, lat1=40.0, lon0=-40.0, lon1=-30.0, step=0.5):
    lat = np.round(np.arange(lat0, lat1 + step / 2, step), 10)
    lon = np.round(np.arange(lon0, lon1 + step / 2, step), 10)
    return lat, lon


def standard_density(p):
    """rho(SSO, 0 degC, p) in kg m-3 (python3-gsw)."""
    return gsw.rho(SSO, 0.0, p)


def pressure_of_depth(depth, lat):
    """Sea pressure (dbar) of depth levels (m) on latitudes: array (nz, ny)."""
    d = np.asarray(depth, dtype=np.float64)[:, None]
    return gsw.p_from_z(-d, np.asarray(lat)[None, :])


def height_of_pressure(p, lat):
    """Height z (m, up) of pressure levels (dbar) on latitudes: array (nz, ny)."""
    pp = np.asarray(p, dtype=np.float64)[:, None]
    return gsw.z_from_p(pp, np.asarray(lat)[None, :])


def write_hydro(path, lat, lon, levels, fields, *, vertical="depth", times=None,
                vertical_attrs=None, fill_mask=None, fmt="NETCDF4", var_dtype="f8",
                vname=None):
    """Write 3-D hydrography.

    fields: {name: (kind, array (nz, ny, nx) or (nt, nz, ny, nx))}, kind a key of STD.
    vertical: 'depth' (m, positive down), 'height' (m, positive up, values <= 0),
    'pressure' (dbar). fill_mask: boolean (nz, ny, nx), True = missing (below the floor)."""
    levels = np.asarray(levels, dtype=np.float64)
    ds = netCDF4.Dataset(path, "w", format=fmt)
    try:
        zname = vname or {"depth": "depth", "height": "z", "pressure": "pres"}[vertical]
        if times is not None:
            ds.createDimension("time", None)
        ds.createDimension(zname, levels.size)
        ds.createDimension("lat", lat.size)
        ds.createDimension("lon", lon.size)
        if times is not None:
            tv = ds.createVariable("time", "f8", ("time",))
            tv.standard_name = "time"
            tv.units = make_ssh.TIME_UNITS
            tv.calendar = make_ssh.CALENDAR
            tv.axis = "T"
            tv[:] = netCDF4.date2num(times, make_ssh.TIME_UNITS, make_ssh.CALENDAR)
        zv = ds.createVariable(zname, "f8", (zname,))
        if vertical == "depth":
            zv.standard_name = "depth"
            zv.units = "m"
            zv.positive = "down"
            zv[:] = levels
        elif vertical == "height":
            zv.standard_name = "height"
            zv.units = "m"
            zv.positive = "up"
            zv[:] = -levels
        else:
            zv.standard_name = "sea_water_pressure"
            zv.units = "dbar"
            zv.positive = "down"
            zv[:] = levels
        zv.axis = "Z"
        for k, v in (vertical_attrs or {}).items():
            if v is None:
                if k in zv.ncattrs():
                    zv.delncattr(k)
            else:
                zv.setncattr(k, v)
        la = ds.createVariable("lat", "f8", ("lat",))
        la.standard_name = "latitude"
        la.units = "degrees_north"
        la[:] = lat
        lo = ds.createVariable("lon", "f8", ("lon",))
        lo.standard_name = "longitude"
        lo.units = "degrees_east"
        lo[:] = lon
        dims = (("time",) if times is not None else ()) + (zname, "lat", "lon")
        for name, (kind, arr) in fields.items():
            sn, units = STD[kind]
            a = np.array(arr, dtype=np.float64)
            if fill_mask is not None:
                a = np.where(np.broadcast_to(fill_mask, a.shape), np.nan, a)
            fv = FILL if var_dtype == "f4" else np.float64(9.969209968386869e36)
            var = ds.createVariable(name, var_dtype, dims, fill_value=fv)
            var.standard_name = sn
            var.units = units
            var[:] = np.ma.masked_invalid(a)
        ds.Conventions = "CF-1.12"
        ds.title = "Verrand Basin synthetic hydrography (invented)"
        ds.source = "seatilt tests/e2e/profile_data.py"
        ds.history = "profile_data.py"
    finally:
        ds.close()
    return path


def write_heights(path, lat, lon, eta, *, kind="absolute", times=None, dtype="f8"):
    """Heights (m) on the grid via the project's make_ssh writer (double precision by
    default, so that float32 rounding of the heights does not enter exact checks)."""
    fld = make_ssh.SshField(lat, lon, eta, times=times, kind=kind,
                            title="Verrand Basin synthetic sea surface height (invented)")
    return make_ssh.write_ssh(path, fld, no_time=times is None, dtype=dtype)


def mesh(lat, lon):
    return np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")


def coriolis(lat_deg):
    return 2.0 * OMEGA * np.sin(np.radians(lat_deg))


# ---- scenario 1: density given, linear in latitude/longitude (exact solution) ----
def analytic_case(levels=(0.0, 50.0, 100.0, 200.0, 400.0, 700.0, 1000.0), A=40.0, C=-15.0,
                  H=2000.0, B=-0.8, D=0.3, c0=2.0):
    """In-situ density rho = rho_std(p(z, lat)) + c0 + (A phi + C lambda) q(z), q = 1 + z/H,
    and heights eta = B phi + D lambda (phi, lambda in radians). Returns a dict with the
    fields and the exact u(z), v(z) (sphere R1, g0, rho0 = 1025)."""
    lat, lon = grid()
    phi, lam = mesh(lat, lon)
    depth = np.asarray(levels)
    z = -depth
    q = 1.0 + z / H
    p = pressure_of_depth(depth, lat)                  # (nz, ny)
    rho = (standard_density(p)[:, :, None] + c0
           + (A * phi + C * lam)[None, :, :] * q[:, None, None])
    eta = B * phi + D * lam
    f = coriolis(lat)[:, None]
    cosp = np.cos(phi)
    us = -G0 * B / (f * R1) * np.ones_like(phi)
    vs = G0 * D / (f * R1 * cosp)
    # int_0^z q dz' = z + z^2/(2H)
    Q = lambda zz: zz + zz * zz / (2.0 * H)  # noqa: E731
    u = lambda zz: us + G0 * A / (RHO0 * f * R1) * Q(zz)  # noqa: E731
    v = lambda zz: vs - G0 * C / (RHO0 * f * R1 * cosp) * Q(zz)  # noqa: E731
    return dict(lat=lat, lon=lon, depth=depth, rho=rho, eta=eta, u=u, v=v, us=us, vs=vs)


# ---- scenario 2: temperature and salinity (TEOS-10 through python3-gsw) -------------
def ts_case(levels=(0.0, 25.0, 75.0, 150.0, 300.0, 600.0, 1200.0), lat=None, lon=None):
    """Practical salinity and potential temperature of the Verrand Basin: warm and salty
    in the south-west, a thermocline at ~300 m; returns pt, sp (nz, ny, nx)."""
    if lat is None:
        lat, lon = grid()
    depth = np.asarray(levels, dtype=np.float64)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    x = (lo - lon.min()) / max(lon.max() - lon.min(), 1e-9)
    y = (la - lat.min()) / max(lat.max() - lat.min(), 1e-9)
    decay = np.exp(-depth / 300.0)[:, None, None]
    pt = 4.0 + (14.0 - 4.0 * y - 3.0 * x + 1.5 * np.sin(3.0 * x + 2.0 * y))[None] * decay
    sp = 34.7 + (0.9 - 0.4 * y - 0.3 * x)[None] * decay
    return dict(lat=lat, lon=lon, depth=depth, pt=pt, sp=sp)


def ts_density_anomaly(pt, sp, p):
    """rho' = rho(SA, CT, p) - rho(SSO, 0, p) with SA = SR = uPS SP (python3-gsw);
    p broadcastable to pt."""
    sa = gsw.SR_from_SP(sp)
    ct = gsw.CT_from_pt(sa, pt)
    return gsw.rho(sa, ct, p) - standard_density(p), gsw.rho(sa, ct, p)


def thermal_wind_reference(lat, lon, z, rho_anom, us, vs):
    """Independent numpy re-computation (3-point centred differences in the interior,
    sphere R1, g0, rho0 1025, trapezoid from the surface with shear held above the first
    level). z: (nz, ny) heights (m, up); rho_anom (nz, ny, nx). Returns u, v (nz, ny, nx)
    with NaN on the outer rows/columns."""
    phi = np.radians(lat)
    lam = np.radians(lon)
    nz, ny, nx = rho_anom.shape
    drho_dphi = np.full(rho_anom.shape, np.nan)
    drho_dlam = np.full(rho_anom.shape, np.nan)
    drho_dphi[:, 1:-1, :] = (rho_anom[:, 2:, :] - rho_anom[:, :-2, :]) / (phi[2:] - phi[:-2])[None, :, None]
    drho_dlam[:, :, 1:-1] = (rho_anom[:, :, 2:] - rho_anom[:, :, :-2]) / (lam[2:] - lam[:-2])[None, None, :]
    f = coriolis(lat)[None, :, None]
    cosp = np.cos(phi)[None, :, None]
    su = G0 / (RHO0 * f * R1) * drho_dphi
    sv = -G0 / (RHO0 * f * R1 * cosp) * drho_dlam
    zz = z[:, :, None]
    u = np.empty(rho_anom.shape)
    v = np.empty(rho_anom.shape)
    u[0] = us + su[0] * zz[0]
    v[0] = vs + sv[0] * zz[0]
    for k in range(1, nz):
        u[k] = u[k - 1] + 0.5 * (su[k - 1] + su[k]) * (zz[k] - zz[k - 1])
        v[k] = v[k - 1] + 0.5 * (sv[k - 1] + sv[k]) * (zz[k] - zz[k - 1])
    return u, v


def surface_reference(lat, lon, eta):
    """Surface geostrophic velocity, 3-point centred, sphere R1, g0 (interior only)."""
    phi = np.radians(lat)
    lam = np.radians(lon)
    us = np.full(eta.shape, np.nan)
    vs = np.full(eta.shape, np.nan)
    f = coriolis(lat)[:, None]
    us[1:-1, :] = -G0 / (f[1:-1] * R1) * (eta[2:, :] - eta[:-2, :]) / (phi[2:] - phi[:-2])[:, None]
    vs[:, 1:-1] = (G0 / (f * R1 * np.cos(phi)[:, None]) * (eta[:, 2:] - eta[:, :-2])
                   / (lam[2:] - lam[:-2])[None, :])
    return us, vs


def jet_heights(lat, lon):
    """Sea surface falling northward across the basin (eastward jet), with a gentle
    zonal tilt; metres."""
    phi, lam = mesh(lat, lon)
    return 0.6 - 4.0 * (phi - phi.min()) + 0.05 * np.sin(4.0 * (lam - lam.min()))


def shelf_mask(lat, lon, depth, floor_deep=1000.0, floor_shelf=120.0):
    """Sea-floor mask (True = below the floor): a shelf in the eastern quarter of the
    basin, a continental slope between, deep water in the west."""
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    x = (lo - lon.min()) / max(lon.max() - lon.min(), 1e-9)
    floor = np.where(x > 0.75, floor_shelf, np.where(x > 0.5, floor_deep - (floor_deep - floor_shelf)
                                                      * (x - 0.5) / 0.25, floor_deep + 1.0))
    return np.asarray(depth)[:, None, None] > floor[None]


def times(n, start=_dt.datetime(2033, 6, 1)):
    return make_ssh.daily_times(start, n)
