"""seatilt in memory: geostrophic surface currents and their kinematics from
sea-surface-height maps held in numpy arrays (and, with ``seatilt.xr``, in
xarray datasets), computed by the same library as ``seatilt currents``, with
the same results.

Geostrophic surface currents are not total currents: Ekman (wind-driven),
tidal, inertial and wave-driven flows are absent, and the balance fails near
the equator, at coasts and at scales the height map does not resolve. Do not
use them for navigation or safety-of-life decisions.

>>> import numpy as np, seatilt
>>> lat = np.linspace(30.0, 40.0, 41); lon = np.linspace(-45.0, -35.0, 41)
>>> eta = 0.2 * np.exp(-((lat[:, None] - 35.0) ** 2 + (lon[None, :] + 40.0) ** 2))
>>> out = seatilt.currents(eta, lat, lon, order=4, fields="u,v,speed")
>>> sorted(out)
['quality', 'speed', 'u', 'v']
>>> out["u"].dtype, out["u"].shape
(dtype('float32'), (41, 41))

See docs/python.md for the options, outputs and the xarray layer.
"""

from __future__ import annotations

import numbers
import operator

import numpy as np

from . import _seatilt
from ._seatilt import InputError, UsageError

UsageError.__module__ = InputError.__module__ = __name__  # shown as seatilt.UsageError
__version__ = _seatilt.__version__
__all__ = ["currents", "FIELDS", "CAUTION", "InputError", "UsageError", "xr"]

#: Every output field, in the order of the files ("quality" last).
FIELDS = tuple(_seatilt.field_names())
#: What geostrophic surface currents are not (the outputs' ``comment``).
CAUTION = _seatilt.caution()


def _option_text(order, equator, equator_band, coast, earth, gravity):
    """Resolve the shared options once, with the command line's checks and messages."""
    if isinstance(gravity, bool):
        raise TypeError("gravity: 'standard', 'wgs84' or a number in m s-2 expected, got bool")
    if isinstance(gravity, numbers.Real):
        gravity = repr(float(gravity))  # round-trips exactly through the library's strtod
    if not isinstance(gravity, str):
        raise TypeError(f"gravity: 'standard', 'wgs84' or a number in m s-2 expected, "
                        f"got {type(gravity).__name__}")
    for name, value in (("equator", equator), ("coast", coast), ("earth", earth)):
        if not isinstance(value, str):
            raise TypeError(f"{name}: a string expected, got {type(value).__name__}")
    if isinstance(order, bool):
        raise TypeError("order: an integer expected, got bool")
    return _seatilt.resolve_options(operator.index(order), equator, float(equator_band),
                                    coast, earth, gravity)


def _field_text(fields):
    if fields is None:
        return "all"
    if isinstance(fields, str):
        return fields
    items = list(fields)
    if not all(isinstance(f, str) for f in items):
        raise TypeError("fields: a comma list or a sequence of field names expected")
    return ",".join(items)


def _threads(threads):
    if threads is None:
        return 0
    if isinstance(threads, bool):
        raise TypeError("threads: an integer expected, got bool")
    return operator.index(threads)


def _float64(dtype):
    name = np.dtype(dtype).name if not isinstance(dtype, str) else dtype
    if name not in ("float32", "float64"):
        raise _seatilt.UsageError(f"dtype: '{dtype}' is not float32 or float64")
    return name == "float64"


def _native(a):
    """A in native byte order (a copy only when it is not)."""
    if not a.dtype.isnative:
        return a.astype(a.dtype.newbyteorder("="))
    return a


def _heights(eta):
    """(values, mask or None) of ETA without copying: a masked array's data and
    mask are passed as they are, any strides allowed."""
    if isinstance(eta, np.ma.MaskedArray):
        data = np.ma.getdata(eta)
        mask = np.ma.getmask(eta)
        mask = None if mask is np.ma.nomask else np.asarray(mask, dtype=bool)
    else:
        data, mask = np.asarray(eta), None
    return _native(data), mask


def currents(eta, lat, lon, *, order=2, equator="blend", equator_band=5.0, coast="one-sided",
             earth="wgs84", gravity="standard", fields="all", threads=None, units="m",
             dtype="float32"):
    """Geostrophic surface currents and kinematics of height maps in memory.

    eta: heights, 2-D (lat, lon) or 3-D (time, lat, lon), float32 or float64
        (integers are read exactly), any strides; NaN, +-inf or masked cells
        (numpy.ma) are missing. Not copied: each time step is read in row
        bands straight from the array.
    lat, lon: 1-D coordinates in degrees north / east, strictly monotonic
        (latitude either way, longitude ascending; a global grid closing on
        360 degrees is periodic).
    order: 2, 4 or 6 (3-, 5- or 7-point centred stencils).
    equator: "mask", "beta" or "blend"; equator_band: half-width (0..30 deg).
    coast: "one-sided" or "mask"; earth: "sphere" or "wgs84".
    gravity: "standard", "wgs84" or a number in m s-2 (0.1..100).
    fields: "all", a comma list or a sequence of names from seatilt.FIELDS;
        "quality" is always returned.
    threads: OpenMP threads (None or 0 = all cores).
    units: UDUNITS length unit of eta ("m", "cm", "mm", ...).
    dtype: "float32" (default; the values a reader of the file output gets,
        bit for bit, NaN where the file holds _FillValue) or "float64" (the
        unrounded double results).

    Returns {name: numpy array} in seatilt.FIELDS order, each of eta's
    shape: float32/float64 fields in SI units (m s-1, s-1, s-2), "quality"
    as int8 bit flags (1 one-sided difference, 2 beta-plane equator,
    4 blended equator, 8 missing height, 16 masked equatorial band, 32 pole,
    64 masked near coast).

    The computation runs without the GIL. Invalid option values raise
    seatilt.UsageError (a ValueError) with the command line's message;
    bad input (shapes, coordinates, a time step with every cell missing)
    raises seatilt.InputError (a ValueError); wrong types raise TypeError.

    Geostrophic surface currents are not total currents and are not for
    navigation.
    """
    options = _option_text(order, equator, equator_band, coast, earth, gravity)
    field_text = _field_text(fields)
    nthreads = _threads(threads)
    float64 = _float64(dtype)
    if not isinstance(units, str):
        raise TypeError("units: a UDUNITS string expected")
    conversion = _seatilt.length_to_metres(units)
    if conversion is None:
        raise _seatilt.UsageError(
            f"units: '{units}' is not a length understood by UDUNITS-2 (e.g. m, cm, mm)")
    unpacking = _seatilt.Unpacking()
    unpacking.to_metres_scale, unpacking.to_metres_offset = conversion
    data, mask = _heights(eta)
    return _seatilt.compute(data, mask, lat, lon, options, field_text, nthreads, float64,
                            unpacking, "", "")


def __getattr__(name):
    # seatilt.xr is imported on first use: xarray is slow to import and optional.
    if name == "xr":
        import importlib
        return importlib.import_module(".xr", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
