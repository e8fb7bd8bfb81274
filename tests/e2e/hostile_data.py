"""Generators of hostile inputs for tests/e2e/test_hostile_inputs.py (issue #9).

Each function writes one malformed, lying or enormous netCDF file with
Debian's netCDF4-python and returns its path. The grids are small and the
values invented (the Tessaline Sea of the demo data); only what makes a file
hostile differs from an ordinary input written by scripts/make_ssh.py.
"""

from __future__ import annotations

import numpy as np
import netCDF4

# CF standard name of absolute heights (CF standard-name table).
STD_ABSOLUTE = "sea_surface_height_above_geoid"
TIME_UNITS = "days since 2031-04-14 00:00:00"


def _coords(ds, lat, lon, lat_dtype="f8", lon_dtype="f8", lat_attrs=None, lon_attrs=None):
    ds.createDimension("lat", len(lat))
    ds.createDimension("lon", len(lon))
    la = ds.createVariable("lat", lat_dtype, ("lat",))
    la.units = "degrees_north"
    la.standard_name = "latitude"
    for k, v in (lat_attrs or {}).items():
        la.setncattr(k, v)
    la.set_auto_maskandscale(False)
    la[:] = np.asarray(lat, dtype=lat_dtype)
    lo = ds.createVariable("lon", lon_dtype, ("lon",))
    lo.units = "degrees_east"
    lo.standard_name = "longitude"
    for k, v in (lon_attrs or {}).items():
        lo.setncattr(k, v)
    lo.set_auto_maskandscale(False)
    lo[:] = np.asarray(lon, dtype=lon_dtype)


def _time(ds, n, calendar="standard", units=TIME_UNITS):
    ds.createDimension("time", None)
    t = ds.createVariable("time", "f8", ("time",))
    t.units = units
    t.calendar = calendar
    t.standard_name = "time"
    t[:] = np.arange(n, dtype="f8")


def _eta(ny, nx, nt=1):
    """A smooth dome in metres (an invented eddy), shape (nt, ny, nx)."""
    y, x = np.meshgrid(np.linspace(-1, 1, ny), np.linspace(-1, 1, nx), indexing="ij")
    return np.stack([0.3 * np.exp(-(x * x + y * y)) + 0.01 * k for k in range(nt)])


def regular(path, *, ny=12, nx=16, nt=2, fmt="NETCDF4", lat=None, lon=None, calendar="standard",
            var_attrs=None, lat_attrs=None, lon_attrs=None, dtype="f4", units="m",
            standard_name=STD_ABSOLUTE, time_units=TIME_UNITS):
    """An ordinary (time, lat, lon) height file, with whatever the caller overrides.

    var_attrs values of None delete the attribute; bytes values are written as
    raw NC_CHAR text (so they may hold bytes that are not UTF-8)."""
    lat = np.linspace(30.0, 36.0, ny) if lat is None else np.asarray(lat, dtype="f8")
    lon = np.linspace(-20.0, -12.0, nx) if lon is None else np.asarray(lon, dtype="f8")
    with netCDF4.Dataset(path, "w", format=fmt) as ds:
        _time(ds, nt, calendar, time_units)
        _coords(ds, lat, lon, lat_attrs=lat_attrs, lon_attrs=lon_attrs)
        v = ds.createVariable("ssh", dtype, ("time", "lat", "lon"))
        v.set_auto_maskandscale(False)
        attrs = {"standard_name": standard_name, "units": units}
        attrs.update(var_attrs or {})
        for k, a in attrs.items():
            if a is None:
                continue
            v.setncattr(k, a)  # bytes are stored as they are (NC_CHAR)
        v[:] = _eta(len(lat), len(lon), nt).astype(dtype)
    return path


def huge_declared(path, *, ny=2**33, nx=2**33):
    """netCDF-4 file declaring a (1, NY, NX) height grid and coordinates of
    those lengths without writing any of their values (the file stays ~10 KB)."""
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        ds.createDimension("time", 1)
        ds.createDimension("lat", ny)
        ds.createDimension("lon", nx)
        t = ds.createVariable("time", "f8", ("time",))
        t.units = TIME_UNITS
        t[:] = [0.0]
        la = ds.createVariable("lat", "f8", ("lat",), chunksizes=(min(ny, 1 << 16),))
        la.units = "degrees_north"
        lo = ds.createVariable("lon", "f8", ("lon",), chunksizes=(min(nx, 1 << 16),))
        lo.units = "degrees_east"
        v = ds.createVariable("ssh", "f4", ("time", "lat", "lon"),
                              chunksizes=(1, min(ny, 64), min(nx, 1024)))
        v.standard_name = STD_ABSOLUTE
        v.units = "m"
    return path


def wide_unwritten(path, *, ny=64, nx=2**20):
    """netCDF-4: real coordinates (NX columns) but a height variable never
    written; one row band of this grid needs more than a small memory limit."""
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        _time(ds, 1)
        ds.createDimension("lat", ny)
        ds.createDimension("lon", nx)
        la = ds.createVariable("lat", "f8", ("lat",))
        la.units = "degrees_north"
        la[:] = np.linspace(30.0, 40.0, ny)
        lo = ds.createVariable("lon", "f8", ("lon",))
        lo.units = "degrees_east"
        lo[:] = np.linspace(-180.0, 179.0, nx)
        v = ds.createVariable("ssh", "f4", ("time", "lat", "lon"), chunksizes=(1, 8, 4096))
        v.standard_name = STD_ABSOLUTE
        v.units = "m"
    return path


def unwritten_height(path):
    """netCDF-4: ordinary coordinates, a height variable never written."""
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        _time(ds, 1)
        _coords(ds, np.linspace(30.0, 36.0, 12), np.linspace(-20.0, -12.0, 16))
        v = ds.createVariable("ssh", "f4", ("time", "lat", "lon"))
        v.standard_name = STD_ABSOLUTE
        v.units = "m"
    return path


def big_regular(path, *, ny=600, nx=1200, nt=24, fmt="NETCDF4"):
    """A larger ordinary file (4 bytes per cell and step, NY x NX x NT) that
    takes a noticeable time to process, for the changes-while-read tests."""
    lat = np.linspace(20.0, 50.0, ny)
    lon = np.linspace(-40.0, 20.0, nx)
    with netCDF4.Dataset(path, "w", format=fmt) as ds:
        _time(ds, nt)
        _coords(ds, lat, lon)
        kw = {} if fmt.startswith("NETCDF3") else {"chunksizes": (1, 64, nx)}
        v = ds.createVariable("ssh", "f4", ("time", "lat", "lon"), **kw)
        v.standard_name = STD_ABSOLUTE
        v.units = "m"
        y, x = np.meshgrid(np.linspace(-3, 3, ny), np.linspace(-3, 3, nx), indexing="ij")
        for k in range(nt):
            v[k] = (0.3 * np.sin(x + 0.1 * k) * np.cos(y)).astype("f4")
    return path
