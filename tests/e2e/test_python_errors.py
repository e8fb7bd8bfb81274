#!/usr/bin/python3
"""End-to-end: the Python module's errors.

- Invalid option values raise seatilt.UsageError (a ValueError) whose text is
  the one line the command line prints for the same value (the CLI is run and
  its "seatilt: error: MESSAGE" line compared).
- Bad input raises seatilt.InputError (a ValueError) naming the problem:
  wrong shapes, non-monotonic or non-finite coordinates, a time step with
  every cell missing, no or several height variables, ellipsoidal heights,
  units that are not a length. Where the reader has the same rule, the text
  is the CLI's with the Python keyword (variable=) for the option (--variable).
- Wrong Python types raise TypeError.
"""

import os
import sys
import unittest

import numpy as np
import xarray as xr

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import python_util as pu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402
import e2e_util as eu  # noqa: E402

seatilt = None


def setUpModule():
    global seatilt
    seatilt = pu.import_seatilt()


def small():
    lat = np.linspace(30.0, 34.0, 9)
    lon = np.linspace(-20.0, -15.0, 11)
    eta = 0.1 * np.sin(np.radians(lat))[:, None] * np.cos(np.radians(lon))[None, :]
    return eta, lat, lon


class OptionMessages(eu.SeatiltTestCase):
    """Same value, same message as `seatilt currents` (src/cli)."""

    CASES = [
        (["--order", "3"], dict(order=3)),
        (["--order", "8"], dict(order=8)),
        (["--equator", "tropics"], dict(equator="tropics")),
        (["--equator-band", "45"], dict(equator_band=45)),
        (["--equator-band", "-1"], dict(equator_band=-1.0)),
        (["--coast", "two-sided"], dict(coast="two-sided")),
        (["--earth", "flat"], dict(earth="flat")),
        (["--gravity", "heavy"], dict(gravity="heavy")),
        (["--gravity", "0.01"], dict(gravity=0.01)),
        (["--gravity", "250"], dict(gravity="250")),
        (["--fields", "u,curl"], dict(fields="u,curl")),
        (["--fields", "u,curl"], dict(fields=["u", "curl"])),
        (["--threads", "-1"], dict(threads=-1)),
    ]

    def cli_message(self, args):
        proc = eu.run(["currents", self.path("absent.nc"), "-o", self.path("out.nc"), *args])
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        line = self.assert_one_error_line(proc, args[0])
        return line[len("seatilt: error: "):]

    def test_messages_equal_the_command_line(self):
        eta, lat, lon = small()
        for args, kwargs in self.CASES:
            with self.subTest(args=args):
                expected = self.cli_message(args)
                with self.assertRaises(seatilt.UsageError) as cm:
                    seatilt.currents(eta, lat, lon, **kwargs)
                self.assertIsInstance(cm.exception, ValueError)
                self.assertEqual(str(cm.exception), expected)
                ds = xr.Dataset({"h": (("lat", "lon"), eta, {"units": "m"})},
                                coords={"lat": ("lat", lat, {"units": "degrees_north"}),
                                        "lon": ("lon", lon, {"units": "degrees_east"})})
                with self.assertRaises(seatilt.UsageError) as cm:
                    seatilt.xr.currents(ds["h"], **kwargs)
                self.assertEqual(str(cm.exception), expected)

    def test_wrong_types(self):
        eta, lat, lon = small()
        for kwargs in (dict(order="4"), dict(order=4.0), dict(gravity=True), dict(equator=1),
                       dict(threads=1.5), dict(fields=[1, 2]), dict(units=3)):
            with self.subTest(kwargs=kwargs):
                with self.assertRaises(TypeError):
                    seatilt.currents(eta, lat, lon, **kwargs)
        with self.assertRaises(TypeError):
            seatilt.currents(eta.astype(np.complex128), lat, lon)
        with self.assertRaises(TypeError):
            seatilt.currents(np.full(eta.shape, "a"), lat, lon)
        with self.assertRaises(TypeError):
            seatilt.xr.currents(eta)
        with self.assertRaises(seatilt.UsageError):
            seatilt.currents(eta, lat, lon, dtype="float16")
        with self.assertRaisesRegex(seatilt.UsageError, "units: 'degC' is not a length"):
            seatilt.currents(eta, lat, lon, units="degC")


class InputErrors(eu.SeatiltTestCase):

    def assert_input_error(self, text, fn, *args, **kwargs):
        with self.assertRaises(seatilt.InputError) as cm:
            fn(*args, **kwargs)
        self.assertIsInstance(cm.exception, ValueError)
        self.assertIn(text, str(cm.exception))
        self.assertNotIn("\n", str(cm.exception))
        return str(cm.exception)

    def test_shapes(self):
        eta, lat, lon = small()
        self.assert_input_error("heights must be 2-D (lat, lon) or 3-D (time, lat, lon), got "
                                "shape (9,)", seatilt.currents, eta[:, 0], lat, lon)
        self.assert_input_error("got shape (1, 1, 9, 11)", seatilt.currents,
                                eta[None, None], lat, lon)
        self.assert_input_error("heights of shape (9, 11) do not match lat (9) x lon (10)",
                                seatilt.currents, eta, lat, lon[:10])
        self.assert_input_error("heights of shape (2, 9, 11) do not match lat (11) x lon (9)",
                                seatilt.currents, np.stack([eta, eta]), lon, lat)
        self.assert_input_error("lat must be 1-D, got shape (9, 1)", seatilt.currents,
                                eta, lat[:, None], lon)
        self.assert_input_error("latitude axis has fewer than 2 points", seatilt.currents,
                                eta[:1], lat[:1], lon)

    def test_coordinates(self):
        eta, lat, lon = small()
        bad = lat.copy()
        bad[[3, 4]] = bad[[4, 3]]
        self.assert_input_error("latitude is not strictly monotonic (at index 4)",
                                seatilt.currents, eta, bad, lon)
        bad = lon.copy()
        bad[[5, 6]] = bad[[6, 5]]  # a step back is read as a wrap past 360 degrees
        self.assert_input_error("longitudes span 360 degrees or more", seatilt.currents,
                                eta, lat, bad)
        self.assert_input_error("longitude holds a non-finite value", seatilt.currents,
                                eta, lat, np.where(lon > -16, np.inf, lon))
        bad = lat.copy()
        bad[2] = np.nan
        self.assert_input_error("latitude holds a non-finite value", seatilt.currents,
                                eta, bad, lon)
        self.assert_input_error("latitude outside [-90, 90]", seatilt.currents,
                                eta, lat + 60.0, lon)

    def test_all_missing(self):
        eta, lat, lon = small()
        self.assert_input_error("every cell is missing (NaN, masked or fill) at time step 0",
                                seatilt.currents, np.full_like(eta, np.nan), lat, lon)
        stack = np.ma.masked_array(np.stack([eta, eta, eta]))
        stack[1] = np.ma.masked
        self.assert_input_error("at time step 1", seatilt.currents, stack, lat, lon)
        ds = xr.Dataset({"sla": (("time", "lat", "lon"), np.full((2,) + eta.shape, np.nan),
                                 {"units": "m", "standard_name": "sea_surface_height"})},
                        coords={"time": ("time", np.array(["2031-01-01", "2031-01-02"],
                                                          dtype="datetime64[ns]")),
                                "lat": ("lat", lat, {"units": "degrees_north"}),
                                "lon": ("lon", lon, {"units": "degrees_east"})})
        self.assertEqual(
            self.assert_input_error("every cell", seatilt.xr.currents, ds),
            "variable sla: every cell is missing (NaN, masked or fill) at time step 0")

    def test_dataset_detection_matches_the_reader(self):
        # Files the CLI refuses: the Python message is the CLI's with variable= for --variable.
        fld = make_ssh.eddy_field(step=0.5, half_width=2.0)
        cases = [
            ("ellipsoid", dict(standard_name=make_ssh.STD_ELLIPSOID)),
            ("no_sn", dict(var_attrs={"standard_name": None})),
            ("degC", dict(units="degC")),
        ]
        for name, write in cases:
            with self.subTest(case=name):
                src = self.path(name + ".nc")
                make_ssh.write_ssh(src, fld, **write)
                proc = eu.run(["currents", src, "-o", self.path(name + "_out.nc")])
                self.assertEqual(proc.returncode, 3, eu.describe(proc))
                cli = self.assert_one_error_line(proc, src)[len("seatilt: error: "):]
                with xr.open_dataset(src) as ds:
                    msg = self.assert_input_error(src, seatilt.xr.currents, ds)
                self.assertEqual(msg.replace("variable=", "--variable").replace(
                    'units= (e.g. units="m")', "--units (e.g. --units m)"), cli)

        # Two height variables: named, or choose one.
        src = self.path("two.nc")
        make_ssh.write_ssh(src, fld)
        with xr.open_dataset(src) as ds:
            two = ds.assign(other=ds["sea_height"].copy())
            self.assert_input_error("several variables have a CF sea-surface-height "
                                    "standard_name: sea_height (sea_surface_height_above_geoid), "
                                    "other (sea_surface_height_above_geoid); choose one "
                                    "with variable=", seatilt.xr.currents, two)
            self.assertIn("u", seatilt.xr.currents(two, variable="other", fields="u"))
            self.assert_input_error("variable nope: not found in the dataset",
                                    seatilt.xr.currents, two, variable="nope")
            with self.assertRaisesRegex(seatilt.UsageError, "given with a DataArray named"):
                seatilt.xr.currents(ds["sea_height"], variable="other")
            swapped = ds.transpose("time", "lon", "lat")
            self.assert_input_error("unsupported dimension order (time=1, lon=", seatilt.xr.currents,
                                    swapped)
            lat = ds["lat"].values.copy()
            lat[[2, 3]] = lat[[3, 2]]
            bad = ds.assign_coords(lat=("lat", lat, ds["lat"].attrs))
            self.assertEqual(
                self.assert_input_error("not strictly monotonic", seatilt.xr.currents, bad),
                f"{src}: variable sea_height: latitude is not strictly monotonic (at index 3)")


if __name__ == "__main__":
    unittest.main()
