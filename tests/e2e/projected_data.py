"""Generators of projected and curvilinear test inputs for tests/e2e/test_projected_*.py.

Heights are analytic fields defined in latitude/longitude (an eddy and an
eastward jet), sampled at the nodes of a projected grid whose node positions
come from pyproj (Debian python3-pyproj, PROJ 9) — a reference outside
seatilt. The expected geostrophic velocities are closed-form derivatives of
the same fields with the WGS84 (or spherical) radii of curvature:

    u = -(g / (f M)) d(eta)/d(phi),   v = (g / (f N cos(phi))) d(eta)/d(lambda)

M, N: NIMA TR8350.2 3rd ed. (REFERENCES.md section 4); f = 2 Omega sin(phi),
Omega = 7.292115e-5 rad/s; g = 9.80665 m s-2 (standard gravity).
Scenarios are invented: the "Skarvo Drift" (north) and "Velmar Shelf" (south).
"""

from __future__ import annotations

import numpy as np
import netCDF4
import pyproj

G0 = 9.80665               # m s-2, CGPM 1901 (REFERENCES.md section 4)
OMEGA = 7.292115e-5        # rad s-1, Groten 2004 / TEOS-10
WGS84_A = 6378137.0        # m, NIMA TR8350.2
WGS84_RF = 298.257223563
R1 = 6371008.7714          # m, IUGG mean radius (Moritz 2000)

# CF grid mappings (CF 1.12 Appendix F). NSIDC north and Antarctic polar
# stereographic are EPSG:3413 and EPSG:3031; the LAEA one is EPSG:3035's.
POLAR_NORTH = {"grid_mapping_name": "polar_stereographic",
               "latitude_of_projection_origin": 90.0,
               "straight_vertical_longitude_from_pole": -45.0,
               "standard_parallel": 70.0, "false_easting": 0.0, "false_northing": 0.0,
               "semi_major_axis": WGS84_A, "inverse_flattening": WGS84_RF}
POLAR_SOUTH = {"grid_mapping_name": "polar_stereographic",
               "latitude_of_projection_origin": -90.0,
               "longitude_of_projection_origin": 0.0,
               "standard_parallel": -71.0, "false_easting": 0.0, "false_northing": 0.0,
               "semi_major_axis": WGS84_A, "inverse_flattening": WGS84_RF}
LAEA_EUROPE = {"grid_mapping_name": "lambert_azimuthal_equal_area",
               "latitude_of_projection_origin": 52.0,
               "longitude_of_projection_origin": 10.0,
               "false_easting": 4321000.0, "false_northing": 3210000.0,
               "semi_major_axis": 6378137.0, "inverse_flattening": 298.257222101}  # GRS80


_CRS_CACHE = {}


def crs_of(mapping):
    """pyproj CRS of a CF grid mapping (numbers in metres). pyproj 3.4's from_cf
    wants the deprecated straight_vertical_longitude_from_pole for polar
    stereographic; the files carry the CF 1.12 longitude_of_projection_origin."""
    key = tuple(sorted((k, str(v)) for k, v in mapping.items()))
    if key not in _CRS_CACHE:
        m = dict(mapping)
        if (m.get("grid_mapping_name") == "polar_stereographic"
                and "longitude_of_projection_origin" in m):
            m.setdefault("straight_vertical_longitude_from_pole",
                         m.pop("longitude_of_projection_origin"))
        _CRS_CACHE[key] = pyproj.CRS.from_cf(m)
    return _CRS_CACHE[key]


def ellipsoid(mapping):
    """(a, e2) of the mapping: earth_radius -> sphere, else a and 1/f."""
    if "earth_radius" in mapping:
        return float(mapping["earth_radius"]), 0.0
    a = float(mapping.get("semi_major_axis", WGS84_A))
    rf = float(mapping.get("inverse_flattening", WGS84_RF))
    f = 0.0 if rf == 0 else 1.0 / rf
    return a, f * (2 - f)


def radii(phi, a, e2):
    """Meridional M and prime-vertical N radius of curvature (m); phi in radians."""
    w2 = 1 - e2 * np.sin(phi) ** 2
    return a * (1 - e2) / w2 ** 1.5, a / np.sqrt(w2)


def grid_around(mapping, lat0, lon0, half, step):
    """1-D x, y (m) of a (2 half + 1)^2 grid with spacing STEP centred on (lat0, lon0)."""
    fwd = pyproj.Transformer.from_crs(crs_of(mapping).geodetic_crs, crs_of(mapping), always_xy=True)
    xc, yc = fwd.transform(lon0, lat0)
    k = np.arange(-half, half + 1, dtype=np.float64)
    return xc + k * step, yc + k * step


def node_lat_lon(mapping, x, y):
    """2-D latitude, longitude (degrees) of the nodes (pyproj inverse)."""
    crs = crs_of(mapping)
    inv = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    xx, yy = np.meshgrid(x, y)
    lon, lat = inv.transform(xx, yy)
    return np.asarray(lat), np.asarray(lon)


class Eddy:
    """eta = A exp(-((phi-p0)^2 + cos(p0)^2 (lam-l0)^2) / ell^2) (angles in radians)."""

    def __init__(self, lat0, lon0, amplitude=0.2, ell=0.015):
        self.p0, self.l0 = np.radians(lat0), np.radians(lon0)
        self.A, self.ell = amplitude, ell

    def _parts(self, lat, lon):
        p = np.radians(lat)
        b = np.remainder(np.radians(lon) - self.l0 + np.pi, 2 * np.pi) - np.pi
        a = p - self.p0
        c2 = np.cos(self.p0) ** 2
        eta = self.A * np.exp(-(a * a + c2 * b * b) / self.ell ** 2)
        return p, a, b, c2, eta

    def eta(self, lat, lon):
        return self._parts(lat, lon)[4]

    def uv(self, lat, lon, a_axis, e2):
        p, a, b, c2, eta = self._parts(lat, lon)
        dphi = -2 * a / self.ell ** 2 * eta          # d(eta)/d(phi)
        dlam = -2 * c2 * b / self.ell ** 2 * eta     # d(eta)/d(lambda)
        m, n = radii(p, a_axis, e2)
        f = 2 * OMEGA * np.sin(p)
        return -G0 / (f * m) * dphi, G0 / (f * n * np.cos(p)) * dlam


class Jet:
    """eta = A sin(phi): a purely eastward flow u = -(g/(f M)) A cos(phi), v = 0."""

    def __init__(self, amplitude=0.5):
        self.A = amplitude

    def eta(self, lat, lon):
        return self.A * np.sin(np.radians(lat))

    def uv(self, lat, lon, a_axis, e2):
        p = np.radians(lat)
        m, _ = radii(p, a_axis, e2)
        f = 2 * OMEGA * np.sin(p)
        return -G0 / (f * m) * self.A * np.cos(p), np.zeros_like(p)


def write_projected(path, mapping, x, y, eta, *, xy_units="m", latlon=None, mapping_name="crs",
                    grid_mapping_attr=None, extra_mapping_attrs=None, time=False, dtype="f8"):
    """Write ETA (ny x nx, metres) on projected X, Y (metres) with the CF grid mapping.

    XY_UNITS "km" stores x, y and the false easting/northing in km (CF Appendix F:
    false_easting is in the unit of x). LATLON = (lat, lon) adds them as 2-D
    auxiliary coordinates. GRID_MAPPING_ATTR overrides the data variable's
    grid_mapping attribute ("" leaves it out). Heights are stored as DTYPE
    (float64 by default, so that float32 rounding, ~6e-8 of |eta|, does not
    mask truncation errors in the analytic checks)."""
    scale = 1000.0 if xy_units == "km" else 1.0
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        ds.title = "Skarvo Drift test heights (invented)"
        dims = ("y", "x")
        if time:
            ds.createDimension("time", None)
            t = ds.createVariable("time", "f8", ("time",))
            t.units = "days since 2026-01-01"
            t.standard_name = "time"
            t.calendar = "standard"
            t[:] = [0.0, 1.0]
            dims = ("time",) + dims
        ds.createDimension("y", len(y))
        ds.createDimension("x", len(x))
        vx = ds.createVariable("x", "f8", ("x",))
        vx.standard_name = "projection_x_coordinate"
        vx.units = xy_units
        vx.axis = "X"
        vx[:] = np.asarray(x) / scale
        vy = ds.createVariable("y", "f8", ("y",))
        vy.standard_name = "projection_y_coordinate"
        vy.units = xy_units
        vy.axis = "Y"
        vy[:] = np.asarray(y) / scale
        crs = ds.createVariable(mapping_name, "i4", ())
        for k, v in mapping.items():
            if k in ("false_easting", "false_northing"):
                v = v / scale
            crs.setncattr(k, v)
        for k, v in (extra_mapping_attrs or {}).items():
            crs.setncattr(k, v)
        if latlon is not None:
            la = ds.createVariable("lat", "f8", ("y", "x"))
            la.standard_name = "latitude"
            la.units = "degrees_north"
            la[:] = latlon[0]
            lo = ds.createVariable("lon", "f8", ("y", "x"))
            lo.standard_name = "longitude"
            lo.units = "degrees_east"
            lo[:] = latlon[1]
        h = ds.createVariable("adt", dtype, dims, fill_value=-9999.0)
        h.standard_name = "sea_surface_height_above_geoid"
        h.units = "m"
        gm = mapping_name if grid_mapping_attr is None else grid_mapping_attr
        if gm:
            h.grid_mapping = gm
        if latlon is not None:
            h.coordinates = "lat lon"
        if time:
            h[:] = np.stack([eta, eta])
        else:
            h[:] = eta


def write_curvilinear(path, lat, lon, eta):
    """Write ETA on a grid given only by 2-D latitude/longitude (dims y, x, no
    coordinate variables), as model output on curvilinear grids is."""
    ny, nx = lat.shape
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        ds.title = "Velmar Shelf model heights on a curvilinear grid (invented)"
        ds.createDimension("y", ny)
        ds.createDimension("x", nx)
        la = ds.createVariable("nav_lat", "f8", ("y", "x"))
        la.standard_name = "latitude"
        la.units = "degrees_north"
        la[:] = lat
        lo = ds.createVariable("nav_lon", "f8", ("y", "x"))
        lo.standard_name = "longitude"
        lo.units = "degrees_east"
        lo[:] = lon
        h = ds.createVariable("zos", "f8", ("y", "x"), fill_value=1e20)
        h.standard_name = "sea_surface_height_above_geoid"
        h.units = "m"
        h.coordinates = "nav_lat nav_lon"
        h[:] = eta
