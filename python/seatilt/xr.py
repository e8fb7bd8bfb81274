"""seatilt.xr: the ``currents`` computation on xarray objects.

``currents(ds_or_dataarray, **options)`` finds the height variable and its
coordinates by the rules of ``seatilt currents`` (the library's reader rules,
applied to the dataset's metadata in memory), computes with the same library
and returns an xarray Dataset with the variables, dimensions, coordinates and
CF attributes of the file output.

Geostrophic surface currents are not total currents and are not for
navigation or safety-of-life decisions.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from . import _field_text, _float64, _native, _option_text, _seatilt, _threads

__all__ = ["currents"]

# Attributes that xarray's CF decoding consumes (they stay in .attrs only
# when the data was opened undecoded, mask_and_scale=False).
_RAW_MARKERS = ("scale_factor", "add_offset", "_FillValue", "missing_value")
_NUMBER_ATTRS = ("scale_factor", "add_offset", "_FillValue", "missing_value", "valid_range",
                 "valid_min", "valid_max")
# Coordinate attributes the file output leaves out (writer.cpp packing_attribute).
_DROPPED_COORD_ATTRS = {"_FillValue", "scale_factor", "add_offset", "missing_value",
                        "valid_min", "valid_max", "valid_range", "_Unsigned", "bounds"}
_IN_MEMORY = "an in-memory dataset"


def _is_number(value):
    a = np.asarray(value)
    return a.dtype.kind in "iuf" and a.size > 0


def _decoded_time(var):
    if var.dtype.kind == "M":
        return True
    if var.dtype.kind == "O" and var.ndim == 1 and var.size > 0:
        first = var.values[0]
        return all(hasattr(first, a) for a in ("year", "month", "day", "calendar"))
    return False


def _describe(name, var):
    """The library's description of one xarray Variable."""
    text = {}
    for key in ("units", "calendar"):  # decoded time keeps these in .encoding
        value = var.encoding.get(key)
        if isinstance(value, str):
            text[key] = value
    for key, value in var.attrs.items():
        if isinstance(value, str):
            text[str(key)] = value
    return {"name": str(name), "dims": [str(d) for d in var.dims],
            "shape": [int(n) for n in var.shape], "numeric": var.dtype.kind in "iuf",
            "decoded_time": _decoded_time(var), "text": text}


def _unpacking(var, values, layout, source, name):
    """How VALUES become metres: the reader's rules on the undecoded attributes,
    or on what xarray's decoding left (valid range, default fill)."""
    scale, offset = layout["to_metres_scale"], layout["to_metres_offset"]
    attrs, enc = var.attrs, var.encoding
    if any(k in attrs for k in _RAW_MARKERS):  # opened with mask_and_scale=False
        numbers_ = [(k, np.asarray(attrs[k])) for k in _NUMBER_ATTRS
                    if k in attrs and _is_number(attrs[k])]
        unsigned = str(attrs.get("_Unsigned", "")).strip().lower() == "true"
        return _seatilt.unpacking_from_attributes(values.dtype, numbers_, unsigned, scale,
                                                  offset, source, name)
    if "scale_factor" in enc or "add_offset" in enc:
        # Unpacked by xarray: only the valid range is left, in packed units.
        u = _seatilt.Unpacking()
        u.to_metres_scale, u.to_metres_offset = scale, offset
        sf = float(np.asarray(enc.get("scale_factor", 1.0)))
        ao = float(np.asarray(enc.get("add_offset", 0.0)))
        lo = hi = None
        if "valid_range" in attrs and _is_number(attrs["valid_range"]):
            lo, hi = (float(x) for x in np.asarray(attrs["valid_range"]).ravel()[:2])
        else:
            if "valid_min" in attrs and _is_number(attrs["valid_min"]):
                lo = float(np.asarray(attrs["valid_min"]).ravel()[0])
            if "valid_max" in attrs and _is_number(attrs["valid_max"]):
                hi = float(np.asarray(attrs["valid_max"]).ravel()[0])
        ends = [None if x is None else x * sf + ao for x in (lo, hi)]
        if sf < 0:
            ends = ends[::-1]
        u.valid_min, u.valid_max = ends
        return u
    # Decoded, not packed: xarray masked _FillValue/missing_value (kept in
    # .encoding); the reader's rules also drop the valid range and, without a
    # _FillValue, the netCDF default fill of the type.
    numbers_ = [(k, np.asarray(attrs[k])) for k in ("valid_range", "valid_min", "valid_max")
                if k in attrs and _is_number(attrs[k])]
    numbers_ += [(k, np.asarray(enc[k])) for k in ("_FillValue", "missing_value")
                 if k in enc and enc[k] is not None and _is_number(enc[k])]
    return _seatilt.unpacking_from_attributes(values.dtype, numbers_, False, scale, offset,
                                              source, name)


def _coordinate(var):
    out = var.copy(deep=False)
    out.attrs = {k: v for k, v in var.attrs.items() if k not in _DROPPED_COORD_ATTRS}
    return out


def currents(data, *, variable=None, units=None, order=2, equator="blend", equator_band=5.0,
             coast="one-sided", earth="wgs84", gravity="standard", fields="all", threads=None,
             dtype="float32"):
    """Geostrophic surface currents and kinematics of an xarray Dataset or DataArray.

    data: a Dataset (the height variable is the one with a CF
        sea-surface-height standard_name, or VARIABLE) or a DataArray (the
        heights themselves). Latitude, longitude and time are found by CF
        rules (units degrees_north/degrees_east, standard_name, axis; time by
        standard_name, axis, "<unit> since <date>" or decoded dates); layouts
        (lat, lon) and (time, lat, lon), other dimensions only of size 1.
    variable: name of the height variable (like --variable).
    units: override the height units (like --units); otherwise its units
        attribute, converted to metres with UDUNITS-2.
    order, equator, equator_band, coast, earth, gravity, fields, threads,
    dtype: as for seatilt.currents.

    Returns a Dataset with the requested fields and quality on the height
    variable's (time, lat, lon) dimensions, its coordinates (attributes as
    in the file output), the CF attributes of the file output, and the
    global attributes of the file output (Conventions, ACDD, settings,
    caution; history names this call). Float fields carry the file's
    _FillValue in .encoding, so to_netcdf writes the same layout.

    Data that xarray decoded (the default) is used as decoded; open packed
    files with mask_and_scale=False to get the reader's exact unpacking in
    double precision (docs/python.md).
    """
    options = _option_text(order, equator, equator_band, coast, earth, gravity)
    field_list = _seatilt.parse_fields(_field_text(fields))
    nthreads = _threads(threads)
    float64 = _float64(dtype)
    if variable is not None and not isinstance(variable, str):
        raise TypeError("variable: a variable name expected")
    if units is not None and not isinstance(units, str):
        raise TypeError("units: a UDUNITS string expected")

    if isinstance(data, xr.DataArray):
        name = str(data.name) if data.name is not None else "height"
        if variable is not None and variable != name:
            raise _seatilt.UsageError(
                f"variable: '{variable}' given with a DataArray named '{name}'")
        items = [(name, data.variable)] + [(str(c), data.coords[c].variable)
                                           for c in data.coords if str(c) != name]
        variable, because = name, "the DataArray given"
        source = data.encoding.get("source", "")
        global_attrs = {}  # a DataArray's attrs are its variable's, not a history
    elif isinstance(data, xr.Dataset):
        items = [(str(k), v) for k, v in data.variables.items()]
        because = ""
        source = data.encoding.get("source", "")
        global_attrs = data.attrs
    else:
        raise TypeError(f"an xarray Dataset or DataArray expected, got {type(data).__name__}")

    names = [n for n, _ in items]
    layout = _seatilt.describe_dataset([_describe(n, v) for n, v in items], variable or "",
                                       units or "", source, because)
    hname = names[layout["height"]]
    hvar = items[layout["height"]][1]
    lat_var, lon_var = items[layout["lat"]][1], items[layout["lon"]][1]
    time_dim = layout["time_dim"]

    # The height values as a numpy array, without copying when they already
    # are one; extra dimensions of size 1 dropped by indexing (a view).
    values = np.asarray(hvar.values)
    keep = {layout["lat_dim"], layout["lon_dim"]} | ({time_dim} if time_dim is not None else set())
    values = _native(values[tuple(slice(None) if k in keep else 0 for k in range(values.ndim))])
    if values.dtype.kind not in "iuf":
        raise _seatilt.InputError(f"variable {hname}: values of dtype {values.dtype} are not numeric")
    unpacking = _unpacking(hvar, values, layout, source, hname)

    lat = np.asarray(lat_var.values, dtype=np.float64)
    lon = np.asarray(lon_var.values, dtype=np.float64)
    result = _seatilt.compute(values, None, lat, lon, options, ",".join(field_list), nthreads,
                              float64, unpacking, source, hname)

    dims = ([hvar.dims[time_dim]] if time_dim is not None else []) + \
        [hvar.dims[layout["lat_dim"]], hvar.dims[layout["lon_dim"]]]
    coords = {}
    if layout["time"] is not None:
        coords[names[layout["time"]]] = _coordinate(items[layout["time"]][1])
    coords[names[layout["lat"]]] = _coordinate(lat_var)
    coords[names[layout["lon"]]] = _coordinate(lon_var)

    var_attrs = _seatilt.variable_attributes(field_list, layout["kind"])
    data_vars = {}
    for field, array in result.items():
        if field == "quality":
            encoding = {"_FillValue": None}  # every cell has a flag
        else:
            encoding = {"_FillValue": np.float32(_seatilt.float_fill), "dtype": "float32"}
        data_vars[field] = xr.Variable(dims, array, attrs=dict(var_attrs[field]),
                                       encoding=encoding)

    given = dict(variable=variable, units=units, order=options.order, equator=options.equator,
                 equator_band=options.equator_band, coast=options.coast, earth=options.earth,
                 gravity=gravity, fields=",".join(field_list), threads=threads, dtype=dtype)
    call = "seatilt.xr.currents(" + ", ".join(
        f"{k}={v!r}" for k, v in given.items() if v is not None) + ")"
    history = global_attrs.get("history", "")
    attrs = _seatilt.global_attributes(source or _IN_MEMORY, hname, layout["kind"],
                                       layout["units"], lat, lon,
                                       history if isinstance(history, str) else "", options, call)
    return xr.Dataset(data_vars, coords=coords, attrs=dict(attrs))
