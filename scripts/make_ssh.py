#!/usr/bin/python3
"""Synthetic sea-surface-height (SSH) files for seatilt's demos and tests.

Importable module (functions) and command-line tool. Every scenario is
invented; no real basin, product or data set is imitated.

Subcommands
  demo-basin OUT.nc   the invented Tessaline Sea: a regional 1/10 degree basin
                      (25N-50N, 60W-30W) with a meandering western-boundary jet,
                      Gaussian eddies of both signs, an invented coastline and
                      islands (fill), several daily steps, absolute height.
  demo-global OUT.nc  the invented ocean planet Pelagora on a global periodic
                      grid (1/4 degree default): sea level anomaly with gyres,
                      an equatorial bump and eddies, invented continents (fill).
  eddy OUT.nc         one analytic Gaussian eddy at a given centre.
  slope OUT.nc        a uniform meridional (or zonal) slope ("rule of thumb").
  pair PACKED FLOAT   the same global field twice: packed int16 in cm with
                      descending latitude and -180..180 longitudes, and float
                      metres ascending with 0..360 longitudes.
  ridge OUT.nc        an equatorial beta-plane ridge eta = A exp(-(y-y0)^2/L^2).
  wave OUT.nc         a smooth global periodic field eta = A cos(lat) sin(k lon).

Common options: --format netcdf4|classic|64bit, --no-time, --variable NAME,
--units m|cm|mm, --dtype f4|f8, --descending (latitude), --kind absolute|anomaly.

Formulas used by the tests (geostrophy on the sphere / ellipsoid):
  u = -(g / (f M)) d(eta)/d(lat),  v = (g / (f N cos(lat))) d(eta)/d(lon)
  f = 2 Omega sin(lat); lat, lon in radians; eta in m; u, v in m s-1.
Constants: REFERENCES.md section 4 (WGS84: NIMA TR8350.2 3rd ed. 2000;
R1 = (2a+b)/3, Moritz 2000; Omega = 7.292115e-5 rad s-1, Groten 2004;
g0 = 9.80665 m s-2, 3rd CGPM 1901).
"""

from __future__ import annotations

import argparse
import datetime as _dt
import math
import sys
from dataclasses import dataclass, field as _dc_field
from typing import Optional, Sequence

import numpy as np

try:
    import netCDF4
    import cftime
except ImportError as exc:  # pragma: no cover - environment problem
    sys.stderr.write(
        "make_ssh.py: needs numpy, netCDF4 and cftime; run it with /usr/bin/python3 "
        f"(Debian python3-netcdf4, python3-cftime): {exc}\n")
    raise

# ---- constants (REFERENCES.md section 4) ----------------------------------
R1 = 6371008.7714            # m, IUGG mean radius (2a+b)/3 (Moritz 2000)
OMEGA = 7.292115e-5          # rad s-1, Earth rotation rate (Groten 2004; TEOS-10 gsw_f)
G0 = 9.80665                 # m s-2, standard gravity (3rd CGPM 1901)
WGS84_A = 6378137.0          # m, semi-major axis (NIMA TR8350.2)
WGS84_F = 1.0 / 298.257223563
WGS84_E2 = WGS84_F * (2.0 - WGS84_F)   # first eccentricity squared, 0.00669437999014
GAMMA_E = 9.7803253359       # m s-2, normal gravity at the equator (TR8350.2 3rd ed.)
SOMIGLIANA_K = 0.00193185265241

TIME_UNITS = "days since 1950-01-01"
CALENDAR = "standard"

# CF standard names (CF standard-name table v83; REFERENCES.md section 1)
STD_ABSOLUTE = "sea_surface_height_above_geoid"
STD_ANOMALY = "sea_surface_height_above_sea_level"
STD_ELLIPSOID = "sea_surface_height_above_reference_ellipsoid"

DEFAULT_NAME = {"absolute": "sea_height", "anomaly": "height_anomaly"}
UNIT_FACTOR = {"m": 1.0, "cm": 100.0, "mm": 1000.0}   # value in unit per metre
NC_FORMAT = {"netcdf4": "NETCDF4", "classic": "NETCDF3_CLASSIC",
             "64bit": "NETCDF3_64BIT_OFFSET", "netcdf4-classic": "NETCDF4_CLASSIC"}
FLOAT32_FILL = np.float32(9.96921e36)   # netCDF default float fill (nc_type NC_FLOAT)
INT16_FILL = np.int16(-32767)


# ---- grids -----------------------------------------------------------------
def axis(start: float, stop: float, step: float) -> np.ndarray:
    """Return start, start+step, ..., stop (inclusive), rounded to 1e-10 degree."""
    n = int(round((stop - start) / step)) + 1
    return np.round(start + step * np.arange(n, dtype=np.float64), 10)


def global_lon(step: float, start: float = 0.0) -> np.ndarray:
    """Return a periodic longitude axis of 360/step points starting at START (exclusive end)."""
    n = int(round(360.0 / step))
    if abs(n * step - 360.0) > 1e-9:
        raise ValueError(f"360 is not a multiple of the step {step}")
    return np.round(start + step * np.arange(n, dtype=np.float64), 10)


def global_lat_centres(step: float) -> np.ndarray:
    """Return cell-centre latitudes -90+step/2 ... 90-step/2 (no pole rows)."""
    n = int(round(180.0 / step))
    return np.round(-90.0 + step * (np.arange(n, dtype=np.float64) + 0.5), 10)


def wrap180(dlon_deg):
    """Return a longitude difference folded into [-180, 180) degrees."""
    return (np.asarray(dlon_deg) + 180.0) % 360.0 - 180.0


# ---- earth model (for analytic reference values) ---------------------------
def coriolis(lat_deg):
    """f = 2 Omega sin(lat) (s-1)."""
    return 2.0 * OMEGA * np.sin(np.radians(lat_deg))


def radii(lat_deg, earth: str = "sphere"):
    """Return (M, N) in m: meridional and prime-vertical radii of curvature.

    sphere: both R1. wgs84: M = a(1-e2)/(1-e2 sin2)^1.5, N = a/(1-e2 sin2)^0.5
    (NIMA TR8350.2; REFERENCES.md section 4)."""
    lat = np.asarray(lat_deg, dtype=np.float64)
    if earth == "sphere":
        r = np.full_like(lat, R1)
        return r, r.copy()
    if earth != "wgs84":
        raise ValueError(earth)
    s2 = np.sin(np.radians(lat)) ** 2
    w = 1.0 - WGS84_E2 * s2
    return WGS84_A * (1.0 - WGS84_E2) / w ** 1.5, WGS84_A / np.sqrt(w)


def normal_gravity(lat_deg):
    """Somigliana normal gravity on WGS84 (m s-2), NIMA TR8350.2 Eq. 4-1."""
    s2 = np.sin(np.radians(np.asarray(lat_deg, dtype=np.float64))) ** 2
    return GAMMA_E * (1.0 + SOMIGLIANA_K * s2) / np.sqrt(1.0 - WGS84_E2 * s2)


def gravity(lat_deg, model="standard"):
    """g (m s-2): 'standard' = g0, 'wgs84' = normal gravity, or a number."""
    lat = np.asarray(lat_deg, dtype=np.float64)
    if model == "standard":
        return np.full_like(lat, G0)
    if model == "wgs84":
        return normal_gravity(lat)
    return np.full_like(lat, float(model))


def geostrophic_uv(lat_deg, deta_dlat, deta_dlon, earth="sphere", grav="standard"):
    """Return (u, v) in m s-1 from analytic derivatives of eta (m per radian).

    u = -(g/(f M)) d(eta)/d(lat), v = (g/(f N cos lat)) d(eta)/d(lon): surface
    geostrophic balance (Stewart, Introduction to Physical Oceanography, ch. 10)
    with dy = M dlat, dx = N cos(lat) dlon (NIMA TR8350.2; REFERENCES.md section 4).
    Arrays broadcast."""
    lat = np.asarray(lat_deg, dtype=np.float64)
    m, n = radii(lat, earth)
    f = coriolis(lat)
    g = gravity(lat, grav)
    u = -(g / (f * m)) * deta_dlat
    v = (g / (f * n * np.cos(np.radians(lat)))) * deta_dlon
    return u, v


# ---- the field container ----------------------------------------------------
@dataclass
class SshField:
    """A height field in metres on a lat/lon grid.

    eta has shape (nt, ny, nx); NaN marks missing cells (land). times holds
    one datetime per step, or None for a file without a time dimension
    (then nt must be 1)."""
    lat: np.ndarray
    lon: np.ndarray
    eta: np.ndarray
    times: Optional[list] = None
    kind: str = "absolute"            # "absolute" or "anomaly"
    title: str = "synthetic sea surface height"
    summary: str = ""
    extra_attrs: dict = _dc_field(default_factory=dict)

    def __post_init__(self):
        self.lat = np.asarray(self.lat, dtype=np.float64)
        self.lon = np.asarray(self.lon, dtype=np.float64)
        eta = np.asarray(self.eta, dtype=np.float64)
        if eta.ndim == 2:
            eta = eta[np.newaxis]
        if eta.shape[1:] != (self.lat.size, self.lon.size):
            raise ValueError(f"eta shape {eta.shape} does not match lat {self.lat.size} x lon {self.lon.size}")
        if self.times is not None and len(self.times) != eta.shape[0]:
            raise ValueError("one time per step needed")
        self.eta = eta

    @property
    def shape(self):
        return self.eta.shape


def flip_lat(fld: SshField) -> SshField:
    """Return the same field with the latitude order reversed."""
    return SshField(fld.lat[::-1].copy(), fld.lon.copy(), fld.eta[:, ::-1, :].copy(),
                    fld.times, fld.kind, fld.title, fld.summary, dict(fld.extra_attrs))


def to_lon_start(fld: SshField, start: float) -> SshField:
    """Return a global periodic field rolled so that longitudes run START .. START+360.

    Only for periodic axes (uniform, nx*dlon = 360). Values are unchanged, only
    reordered and relabelled (e.g. 0..360 -> -180..180)."""
    lon = fld.lon
    new = np.round((lon - start) % 360.0 + start, 10)
    order = np.argsort(new, kind="stable")
    return SshField(fld.lat.copy(), new[order], fld.eta[:, :, order].copy(), fld.times,
                    fld.kind, fld.title, fld.summary, dict(fld.extra_attrs))


def daily_times(start: _dt.datetime, n: int, step_days: float = 1.0):
    """Return N datetimes START, START+step, ..."""
    return [start + _dt.timedelta(days=step_days * k) for k in range(n)]


# ---- writing ------------------------------------------------------------------
def write_ssh(path: str, fld: SshField, *, fmt: str = "netcdf4", variable: Optional[str] = None,
              standard_name: Optional[str] = None, units: str = "m", dtype: str = "f4",
              pack: Optional[dict] = None, no_time: bool = False, fill: bool = True,
              time_units: str = TIME_UNITS, calendar: str = CALENDAR,
              var_attrs: Optional[dict] = None, coord_dtype: str = "f8",
              lat_name: str = "lat", lon_name: str = "lon", time_name: str = "time") -> str:
    """Write FLD to PATH as CF netCDF and return PATH.

    fmt: netcdf4 | netcdf4-classic | classic | 64bit. units: m, cm or mm (values
    are converted from metres). dtype: f4 or f8 for unpacked storage.
    pack: dict(dtype='i2', scale_factor=..., add_offset=...) in UNITS: stored
    integer = round((value - add_offset)/scale_factor), fill -32767.
    no_time: write without a time dimension (needs nt == 1).
    fill=False: write no _FillValue attribute (the field must have no NaN)."""
    nc_fmt = NC_FORMAT[fmt]
    nt, ny, nx = fld.shape
    if (no_time or fld.times is None) and nt != 1:
        raise ValueError("a file without time needs exactly one step")
    with_time = not no_time and fld.times is not None
    kind_std = STD_ABSOLUTE if fld.kind == "absolute" else STD_ANOMALY
    std = kind_std if standard_name is None else standard_name
    name = variable or DEFAULT_NAME.get(fld.kind, "sea_height")
    values = fld.eta * UNIT_FACTOR.get(units, 1.0)   # other units (tests): stored as given

    ds = netCDF4.Dataset(path, "w", format=nc_fmt)
    try:
        if with_time:
            ds.createDimension(time_name, None)
        ds.createDimension(lat_name, ny)
        ds.createDimension(lon_name, nx)
        if with_time:
            tv = ds.createVariable(time_name, "f8", (time_name,))
            tv.standard_name = "time"
            tv.long_name = "time"
            tv.units = time_units
            tv.calendar = calendar
            tv.axis = "T"
            tv[:] = np.asarray(cftime.date2num(fld.times, time_units, calendar), dtype=np.float64)
        la = ds.createVariable(lat_name, coord_dtype, (lat_name,))
        la.standard_name = "latitude"
        la.long_name = "latitude"
        la.units = "degrees_north"
        la.axis = "Y"
        la[:] = fld.lat
        lo = ds.createVariable(lon_name, coord_dtype, (lon_name,))
        lo.standard_name = "longitude"
        lo.long_name = "longitude"
        lo.units = "degrees_east"
        lo.axis = "X"
        lo[:] = fld.lon

        dims = ((time_name,) if with_time else ()) + (lat_name, lon_name)
        missing = ~np.isfinite(values)
        if pack is not None:
            pdt = np.dtype(pack.get("dtype", "i2"))
            sf = np.array(pack["scale_factor"], dtype=np.float32)
            ao = np.array(pack.get("add_offset", 0.0), dtype=np.float32)
            fill_v = INT16_FILL if pdt == np.int16 else np.iinfo(pdt).min + 1
            var = ds.createVariable(name, pdt, dims, fill_value=fill_v if fill else None)
            var.scale_factor = sf
            var.add_offset = ao
            raw = np.round((np.where(missing, 0.0, values) - float(ao)) / float(sf))
            info = np.iinfo(pdt)
            if raw.min() <= info.min + 1 or raw.max() > info.max:
                raise ValueError("field does not fit the packed type; change scale_factor")
            raw = raw.astype(pdt)
            raw[missing] = fill_v
        else:
            fill_v = FLOAT32_FILL if np.dtype(dtype) == np.float32 else np.float64(9.969209968386869e36)
            var = ds.createVariable(name, dtype, dims, fill_value=fill_v if fill else None)
            raw = np.where(missing, fill_v, values).astype(dtype)
            if not fill and missing.any():
                raise ValueError("missing cells need a _FillValue")
        var.set_auto_maskandscale(False)   # raw values are written as computed above
        var.standard_name = std
        var.long_name = ("sea surface height above the geoid" if fld.kind == "absolute"
                         else "sea level anomaly")
        var.units = units
        for k, v in (var_attrs or {}).items():
            if v is None:
                if k in var.ncattrs():
                    var.delncattr(k)
            else:
                var.setncattr(k, v)
        var[:] = raw if with_time else raw[0]

        ds.Conventions = "CF-1.12"
        ds.title = fld.title
        if fld.summary:
            ds.summary = fld.summary
        ds.source = "synthetic field from seatilt scripts/make_ssh.py (invented scenario)"
        ds.history = (_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
                      + " make_ssh.py")
        for k, v in fld.extra_attrs.items():
            ds.setncattr(k, v)
    finally:
        ds.close()
    return path


# ---- analytic test fields ------------------------------------------------------
def gaussian_eddy(lat, lon, lat0, lon0, amp=0.2, radius_m=100e3):
    """Return (eta, deta_dlat, deta_dlon) of one Gaussian eddy on a 2-D mesh.

    eta = A exp(-(x^2 + y^2)/L^2), x = R1 cos(lat0) (lon - lon0),
    y = R1 (lat - lat0) (angles in radians, R1 in m); a closed form in
    (lat, lon) so that its derivatives (m per radian) are exact:
      d(eta)/d(lat) = -2 R1^2 (lat - lat0)/L^2 eta
      d(eta)/d(lon) = -2 R1^2 cos^2(lat0) (lon - lon0)/L^2 eta
    Eddy form as in REFERENCES.md section 5 (amplitudes 5-25 cm, radii 50-100 km)."""
    la, lo = np.meshgrid(np.asarray(lat, float), np.asarray(lon, float), indexing="ij")
    dphi = np.radians(la - lat0)
    dlam = np.radians(wrap180(lo - lon0))
    c0 = math.cos(math.radians(lat0))
    a2 = (R1 / radius_m) ** 2
    eta = amp * np.exp(-a2 * (dphi ** 2 + (c0 * dlam) ** 2))
    return eta, -2.0 * a2 * dphi * eta, -2.0 * a2 * c0 * c0 * dlam * eta


def uniform_slope(lat, lon, lat0, rise_m, per_m, direction="north", lon0=None):
    """Return eta (m) rising RISE_M every PER_M metres northward (or eastward).

    north: eta = s R1 (lat - lat0); east: eta = s R1 cos(lat0) (lon - lon0),
    s = rise/per (dimensionless), angles in radians. Zero at (lat0, lon0)."""
    la, lo = np.meshgrid(np.asarray(lat, float), np.asarray(lon, float), indexing="ij")
    s = rise_m / per_m
    if direction == "north":
        return s * R1 * np.radians(la - lat0)
    if lon0 is None:
        lon0 = float(np.mean(lon))
    return s * R1 * math.cos(math.radians(lat0)) * np.radians(lo - lon0)


def beta_ridge(lat, lon, amp=0.1, width_m=300e3, offset_m=0.0):
    """Return eta = A exp(-(y - y0)^2 / L^2), y = R1 lat (lat in radians), in m.

    For y0 = 0 the equatorial value is u(0) = 2 g A/(beta L^2) (REFERENCES.md
    section 2); beta_ridge_u gives the profiles."""
    la, lo = np.meshgrid(np.asarray(lat, float), np.asarray(lon, float), indexing="ij")
    y = R1 * np.radians(la)
    return amp * np.exp(-((y - offset_m) / width_m) ** 2) + 0.0 * lo


def beta_ridge_u(lat_deg, amp=0.1, width_m=300e3, g=G0, beta=None, formula="geostrophic"):
    """Analytic u (m s-1) of beta_ridge with y0 = 0 on the equatorial beta plane f = beta y.

    formula="geostrophic": u = -(g/f) eta_y = (2 g A/(beta L^2)) exp(-y^2/L^2)
    formula="beta":        u = -(g/beta) eta_yy = (g A/beta)(2/L^2 - 4 y^2/L^4) exp(-y^2/L^2)
    The two agree only at y = 0: u(0) = 2 g A/(beta L^2) = 0.95199 m/s for A = 0.1 m,
    L = 300 km, beta = 2 Omega/R1 (REFERENCES.md section 2). beta may be an array."""
    if beta is None:
        beta = 2.0 * OMEGA / R1   # beta at the equator on the sphere, m-1 s-1
    y = R1 * np.radians(np.asarray(lat_deg, float))
    e = np.exp(-(y / width_m) ** 2)
    if formula == "beta":
        return g * amp / beta * (2.0 / width_m ** 2 - 4.0 * y * y / width_m ** 4) * e
    return 2.0 * g * amp / (beta * width_m ** 2) * e


def zonal_wave(lat, lon, amp=0.2, k=2, phase=0.0):
    """Return (eta, deta_dlat, deta_dlon) for eta = A cos(lat) sin(k lon + phase)
    (m, m per radian); periodic in longitude for integer k."""
    la, lo = np.meshgrid(np.radians(np.asarray(lat, float)), np.radians(np.asarray(lon, float)),
                         indexing="ij")
    s, c = np.sin(k * lo + phase), np.cos(k * lo + phase)
    return amp * np.cos(la) * s, -amp * np.sin(la) * s, amp * k * np.cos(la) * c


# ---- demo scenarios --------------------------------------------------------------
def _eddy_sum(la, lo, eddies):
    """Sum of Gaussian eddies (lat0, lon0, amp_m, radius_m) on a mesh (degrees)."""
    eta = np.zeros_like(la)
    lat_rows = la[:, 0]
    for lat0, lon0, amp, rad in eddies:
        # rows within 6 radii only (exp(-36) ~ 2e-16 relative beyond): speed, not accuracy
        reach = math.degrees(6.0 * rad / R1)
        rows = np.nonzero(np.abs(lat_rows - lat0) <= reach)[0]
        if rows.size == 0:
            continue
        sl = slice(rows[0], rows[-1] + 1)
        x = R1 * math.cos(math.radians(lat0)) * np.radians(wrap180(lo[sl] - lon0))
        y = R1 * np.radians(la[sl] - lat0)
        eta[sl] += amp * np.exp(-(x * x + y * y) / rad ** 2)
    return eta


def demo_basin(step=0.1, days=5, seed=11, start=_dt.datetime(2031, 4, 14)) -> SshField:
    """The invented Tessaline Sea: 25N-50N, 60W-30W, absolute dynamic height (m).

    A western-boundary jet leaves the invented Corran coast near 37N: a tanh
    height step of about 1.1 m across ~50 km along a meandering axis, decaying
    eastward; a subtropical high to the south, a subpolar low to the north;
    nine Gaussian eddies of both signs (5-25 cm, radii 50-100 km) drifting
    west; land: the Corran coast in the west with the Hesk peninsula, Isle
    Varro and the small Minnow islands."""
    rng = np.random.default_rng(seed)
    lat = axis(25.0, 50.0, step)
    lon = axis(-60.0, -30.0, step)
    la, lo = np.meshgrid(lat, lon, indexing="ij")

    # invented coastline: land west of lon_coast(lat); Hesk peninsula near 44N
    t = (la - 25.0) / 25.0
    lon_coast = (-59.0 + 4.0 * t ** 1.5 + 0.8 * np.sin(2 * np.pi * (la - 25.0) / 7.0)
                 + 0.3 * np.sin(2 * np.pi * (la - 25.0) / 2.3)
                 + 3.0 * np.exp(-((la - 44.0) / 0.7) ** 2))
    land = lo < lon_coast
    land |= ((lo + 41.0) / 1.1) ** 2 + ((la - 46.2) / 0.6) ** 2 < 1.0            # Isle Varro
    for c_lat, c_lon, r in [(31.3, -37.0, 0.25), (31.0, -36.4, 0.18), (30.6, -36.9, 0.15)]:
        land |= ((lo - c_lon) / r) ** 2 + ((la - c_lat) / r) ** 2 < 1.0          # Minnow islands

    # eddies: (lat, lon, amplitude m, radius m) with westward drift (km/day)
    eddies = []
    for k in range(9):
        sign = 1.0 if k % 2 == 0 else -1.0
        eddies.append([rng.uniform(28.0, 47.0), rng.uniform(-52.0, -33.0),
                       sign * rng.uniform(0.05, 0.25), rng.uniform(50e3, 100e3),
                       rng.uniform(3.0, 7.0)])

    xe = np.clip(lo + 58.0, 0.0, None)         # degrees east of the coast at the jet
    frames = []
    for d in range(days):
        axis_lat = (37.0 + 0.08 * xe
                    + 1.2 * np.sin(2 * np.pi * xe / 9.0 - 0.35 * d) * (1.0 - np.exp(-xe / 4.0)))
        jet = 0.55 * np.tanh((axis_lat - la) / 0.45) * np.exp(-xe / 18.0)
        gyres = (0.25 * np.exp(-((la - 31.0) / 6.0) ** 2) * np.exp(-xe / 25.0)
                 - 0.20 * np.exp(-((la - 47.0) / 4.0) ** 2))
        now = []
        for lat0, lon0, amp, rad, drift in eddies:
            shift = drift * 1e3 * d / (R1 * math.cos(math.radians(lat0))) * 180.0 / math.pi
            now.append((lat0 - 0.01 * d * np.sign(amp), lon0 - shift, amp, rad))
        eta = 0.40 + jet + gyres + _eddy_sum(la, lo, now)
        frames.append(np.where(land, np.nan, eta))
    return SshField(lat, lon, np.stack(frames), daily_times(start, days), kind="absolute",
                    title="Tessaline Sea synthetic absolute dynamic topography",
                    summary=("Invented regional basin (the Tessaline Sea) with a meandering "
                             "western-boundary jet, Gaussian eddies and an invented coastline; "
                             "generated by seatilt scripts/make_ssh.py for demonstration."),
                    extra_attrs={"scenario": "Tessaline Sea (invented)"})


def _angular_distance_deg(la, lo, lat0, lon0):
    """Great-circle angle (degrees) from (lat0, lon0) on the unit sphere; periodic in lon."""
    p, p0 = np.radians(la), math.radians(lat0)
    dl = np.radians(lo - lon0)
    c = np.sin(p) * math.sin(p0) + np.cos(p) * math.cos(p0) * np.cos(dl)
    return np.degrees(np.arccos(np.clip(c, -1.0, 1.0)))


def demo_global(step=0.25, days=2, seed=5, start=_dt.datetime(2031, 9, 2)) -> SshField:
    """The invented ocean planet Pelagora: global periodic sea level anomaly (m).

    Gyre-scale anomalies (+-10 cm), an equatorial bump (8 cm, 250 km wide),
    ~300 eddies of both signs (5-25 cm, radii 50-100 km) and invented
    continents (Ostrel, Vannic, the Sable Reach, the southern Frostmark) as fill.
    Everything is periodic in longitude by construction."""
    rng = np.random.default_rng(seed)
    lat = global_lat_centres(step)
    lon = global_lon(step, 0.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")

    blobs = [(40.0, 20.0, 22.0), (15.0, 35.0, 14.0), (-20.0, 120.0, 18.0), (5.0, 140.0, 10.0),
             (50.0, 250.0, 20.0), (25.0, 275.0, 12.0), (-35.0, 300.0, 11.0)]
    landness = np.zeros_like(la)
    for lat0, lon0, r in blobs:
        landness += np.exp(-(_angular_distance_deg(la, lo, lat0, lon0) / r) ** 2)
    landness += 0.15 * np.sin(np.radians(3 * lo)) * np.cos(np.radians(4 * la))
    land = landness > 0.55
    land |= la < -74.0 + 4.0 * np.sin(np.radians(3 * lo))                       # Frostmark

    eddies = []
    for k in range(300):
        lat0 = rng.choice([-1.0, 1.0]) * rng.uniform(12.0, 60.0)
        # weaker toward low latitudes (amplitude ~ sin^2 lat below 40 degrees) so that
        # the Rossby number |zeta|/f ~ 4 g A/(f^2 L^2) stays O(0.1), as in altimetry
        weak = min(1.0, (math.sin(math.radians(abs(lat0))) / math.sin(math.radians(40.0))) ** 2)
        eddies.append((lat0, rng.uniform(0.0, 360.0),
                       (1.0 if k % 2 else -1.0) * weak * rng.uniform(0.05, 0.25),
                       rng.uniform(50e3, 100e3)))

    phi = np.radians(la)
    lam = np.radians(lo)
    frames = []
    for d in range(days):
        gyres = (0.10 * np.sin(2 * phi) ** 2 * np.cos(2 * lam - 0.05 * d) * np.cos(phi)
                 - 0.06 * np.exp(-((la + 55.0) / 8.0) ** 2) * np.cos(lam))
        equatorial = 0.08 * np.exp(-(R1 * phi / 250e3) ** 2) * np.cos(lam - 0.1 * d)
        moved = [(a, b - 0.05 * d, c, r) for a, b, c, r in eddies]
        eta = gyres + equatorial + _eddy_sum(la, lo, moved)
        frames.append(np.where(land, np.nan, eta))
    return SshField(lat, lon, np.stack(frames), daily_times(start, days), kind="anomaly",
                    title="Pelagora synthetic sea level anomaly",
                    summary=("Invented ocean planet (Pelagora) with invented continents, gyre-scale "
                             "anomalies, an equatorial bump and eddies; generated by seatilt "
                             "scripts/make_ssh.py for demonstration."),
                    extra_attrs={"scenario": "Pelagora (invented)"})


# ---- test-input scenarios -------------------------------------------------------------
def eddy_field(lat0=35.0, lon0=-40.0, amp=0.2, radius_km=100.0, step=0.1, half_width=4.0,
               kind="absolute", descending=False, times=None) -> SshField:
    """One analytic Gaussian eddy centred at (lat0, lon0) on a box of +-half_width degrees."""
    lat = axis(lat0 - half_width, lat0 + half_width, step)
    lon = axis(lon0 - 1.25 * half_width, lon0 + 1.25 * half_width, step)
    eta, _, _ = gaussian_eddy(lat, lon, lat0, lon0, amp, radius_km * 1e3)
    if times is None:
        times = [_dt.datetime(2030, 7, 1, 12)]
    fld = SshField(lat, lon, eta, times, kind=kind, title="analytic Gaussian eddy")
    return flip_lat(fld) if descending else fld


def slope_field(lat0=45.0, rise_m=1.0, per_km=100.0, direction="north", step=0.1,
                half_width=1.0, kind="absolute", lon0=-20.0) -> SshField:
    """A uniform slope of RISE_M per PER_KM km around lat0 (zero at lat0)."""
    lat = axis(lat0 - half_width, lat0 + half_width, step)
    lon = axis(lon0 - half_width, lon0 + half_width, step)
    eta = uniform_slope(lat, lon, lat0, rise_m, per_km * 1e3, direction, lon0)
    return SshField(lat, lon, eta, [_dt.datetime(2030, 1, 1)], kind=kind,
                    title="uniform sea surface slope")


def pair_field(step=1.0, seed=3) -> SshField:
    """A smooth global periodic field (0..360, ascending) with a land patch, for the
    packed/float equivalence files: zonal waves plus broad Gaussian bumps (m)."""
    rng = np.random.default_rng(seed)
    lat = global_lat_centres(step)
    lon = global_lon(step, 0.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    phi, lam = np.radians(la), np.radians(lo)
    eta = 0.3 * np.cos(phi) * np.sin(2 * lam) + 0.2 * np.sin(2 * phi) * np.cos(3 * lam + 0.4)
    bumps = [(rng.uniform(-60, 60), rng.uniform(0, 360), rng.uniform(-0.4, 0.4),
              rng.uniform(300e3, 600e3)) for _ in range(12)]
    eta = eta + _eddy_sum(la, lo, bumps)
    land = _angular_distance_deg(la, lo, 30.0, 200.0) < 12.0
    land |= _angular_distance_deg(la, lo, -25.0, 355.0) < 8.0    # straddles the 0/360 seam
    return SshField(lat, lon, np.where(land, np.nan, eta), [_dt.datetime(2030, 3, 1)],
                    kind="anomaly", title="smooth global test field")


def write_pair(packed_path, float_path, step=1.0, scale_factor_cm=0.1, add_offset_cm=20.0,
               exact=False, fmt="netcdf4"):
    """Write the same field as packed int16 cm (descending lat, -180..180) and float32 m
    (ascending lat, 0..360). Returns (field, scale_factor_cm as float32).

    exact=False: the float file holds the analytic field, the packed one its
    quantisation (difference <= scale_factor/2 cm per cell).
    exact=True: the float file holds the unpacked values of the packed file."""
    fld = pair_field(step)
    sf = np.float32(scale_factor_cm)
    ao = np.float32(add_offset_cm)
    if exact:
        cm = fld.eta * 100.0
        q = np.round((cm - float(ao)) / float(sf)) * float(sf) + float(ao)
        fld_float = SshField(fld.lat, fld.lon, q / 100.0, fld.times, fld.kind, fld.title)
    else:
        fld_float = fld
    write_ssh(float_path, fld_float, fmt=fmt)
    packed = flip_lat(to_lon_start(fld, -180.0))
    write_ssh(packed_path, packed, fmt=fmt, units="cm",
              pack={"dtype": "i2", "scale_factor": sf, "add_offset": ao})
    return fld, sf


def ridge_field(amp=0.1, width_km=300.0, offset_km=0.0, step=0.1, lat_extent=15.0,
                lon0=-140.0, ncols=21, kind="absolute") -> SshField:
    """Equatorial ridge eta = A exp(-(y-y0)^2/L^2) on |lat| <= lat_extent (row at 0 included)."""
    lat = axis(-lat_extent, lat_extent, step)
    lon = np.round(lon0 + step * np.arange(ncols), 10)
    eta = beta_ridge(lat, lon, amp, width_km * 1e3, offset_km * 1e3)
    return SshField(lat, lon, eta, [_dt.datetime(2030, 10, 5)], kind=kind,
                    title="equatorial beta-plane ridge")


def wave_field(amp=0.2, k=2, step=1.0, lon_start=0.0, lat_step=None, with_poles=True,
               kind="anomaly", phase=0.0, lon_count=None) -> SshField:
    """Global periodic eta = A cos(lat) sin(k lon + phase): latitudes -90..90 (poles
    included when with_poles) and longitudes lon_start .. lon_start+360 (exclusive).
    lon_count < 360/step keeps only the first lon_count columns (a non-periodic strip)."""
    ls = lat_step or step
    lat = axis(-90.0, 90.0, ls) if with_poles else global_lat_centres(ls)
    lon = global_lon(step, lon_start)
    if lon_count is not None:
        lon = lon[:lon_count]
    eta, _, _ = zonal_wave(lat, lon, amp, k, phase)
    return SshField(lat, lon, eta, [_dt.datetime(2030, 6, 1)], kind=kind,
                    title="global zonal wave")


# ---- command line -------------------------------------------------------------------
def _common(p):
    p.add_argument("--format", choices=sorted(NC_FORMAT), default="netcdf4",
                   help="file format (default netcdf4)")
    p.add_argument("--no-time", action="store_true", help="write no time dimension (first step only)")
    p.add_argument("--variable", help="name of the height variable")
    p.add_argument("--units", choices=sorted(UNIT_FACTOR), default="m")
    p.add_argument("--dtype", choices=["f4", "f8"], default="f4")
    p.add_argument("--descending", action="store_true", help="latitude descending")
    p.add_argument("--kind", choices=["absolute", "anomaly"], help="override the height kind")


def _write_from_args(path, fld, a):
    if a.kind:
        fld.kind = a.kind
    if a.descending:
        fld = flip_lat(fld)
    if a.no_time:
        fld = SshField(fld.lat, fld.lon, fld.eta[:1], None, fld.kind, fld.title, fld.summary,
                       fld.extra_attrs)
    write_ssh(path, fld, fmt=a.format, variable=a.variable, units=a.units, dtype=a.dtype)
    nt, ny, nx = fld.shape
    print(f"make_ssh: wrote {path} ({fld.kind}, {nt} x {ny} x {nx})", file=sys.stderr)


def main(argv: Optional[Sequence[str]] = None) -> int:
    head, _, rest = __doc__.partition("\n\n")
    ap = argparse.ArgumentParser(prog="make_ssh.py", description=head, epilog=rest,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = ap.add_subparsers(dest="cmd", required=True)

    p = sub.add_parser("demo-basin", help="invented Tessaline Sea (regional, absolute)")
    p.add_argument("out")
    p.add_argument("--step", type=float, default=0.1, help="grid step in degrees (default 0.1)")
    p.add_argument("--days", type=int, default=5)
    p.add_argument("--seed", type=int, default=11)
    _common(p)

    p = sub.add_parser("demo-global", help="invented planet Pelagora (global, anomaly)")
    p.add_argument("out")
    p.add_argument("--step", type=float, default=0.25, help="grid step in degrees (default 0.25)")
    p.add_argument("--days", type=int, default=2)
    p.add_argument("--seed", type=int, default=5)
    _common(p)

    p = sub.add_parser("eddy", help="analytic Gaussian eddy")
    p.add_argument("out")
    p.add_argument("--lat0", type=float, default=35.0)
    p.add_argument("--lon0", type=float, default=-40.0)
    p.add_argument("--amp", type=float, default=0.2, help="amplitude (m)")
    p.add_argument("--radius-km", type=float, default=100.0, help="e-folding radius L (km)")
    p.add_argument("--step", type=float, default=0.1)
    p.add_argument("--half-width", type=float, default=4.0, help="box half-height (degrees)")
    _common(p)

    p = sub.add_parser("slope", help="uniform slope (rule of thumb)")
    p.add_argument("out")
    p.add_argument("--lat0", type=float, default=45.0)
    p.add_argument("--rise", type=float, default=1.0, help="rise in m ...")
    p.add_argument("--per-km", type=float, default=100.0, help="... per this many km")
    p.add_argument("--direction", choices=["north", "east"], default="north")
    p.add_argument("--step", type=float, default=0.1)
    p.add_argument("--half-width", type=float, default=1.0)
    _common(p)

    p = sub.add_parser("pair", help="packed int16 cm / float m equivalence pair")
    p.add_argument("packed_out")
    p.add_argument("float_out")
    p.add_argument("--step", type=float, default=1.0)
    p.add_argument("--scale-factor", type=float, default=0.1, help="cm per count")
    p.add_argument("--exact", action="store_true", help="float file = unpacked values")
    p.add_argument("--format", choices=sorted(NC_FORMAT), default="netcdf4")

    p = sub.add_parser("ridge", help="equatorial beta-plane ridge")
    p.add_argument("out")
    p.add_argument("--amp", type=float, default=0.1)
    p.add_argument("--width-km", type=float, default=300.0)
    p.add_argument("--offset-km", type=float, default=0.0)
    p.add_argument("--step", type=float, default=0.1)
    p.add_argument("--lat-extent", type=float, default=15.0)
    _common(p)

    p = sub.add_parser("wave", help="global periodic zonal wave")
    p.add_argument("out")
    p.add_argument("--amp", type=float, default=0.2)
    p.add_argument("--wavenumber", type=int, default=2)
    p.add_argument("--step", type=float, default=1.0)
    p.add_argument("--lon-start", type=float, default=0.0)
    _common(p)

    a = ap.parse_args(argv)
    if a.cmd == "demo-basin":
        fld = demo_basin(a.step, a.days, a.seed)
    elif a.cmd == "demo-global":
        fld = demo_global(a.step, a.days, a.seed)
    elif a.cmd == "eddy":
        fld = eddy_field(a.lat0, a.lon0, a.amp, a.radius_km, a.step, a.half_width)
    elif a.cmd == "slope":
        fld = slope_field(a.lat0, a.rise, a.per_km, a.direction, a.step, a.half_width)
    elif a.cmd == "ridge":
        fld = ridge_field(a.amp, a.width_km, a.offset_km, a.step, a.lat_extent)
    elif a.cmd == "wave":
        fld = wave_field(a.amp, a.wavenumber, a.step, a.lon_start)
    elif a.cmd == "pair":
        write_pair(a.packed_out, a.float_out, a.step, a.scale_factor, exact=a.exact, fmt=a.format)
        print(f"make_ssh: wrote {a.packed_out} and {a.float_out}", file=sys.stderr)
        return 0
    else:  # pragma: no cover
        ap.error(a.cmd)
    _write_from_args(a.out, fld, a)
    return 0


if __name__ == "__main__":
    sys.exit(main())
