#!/usr/bin/python3
"""End-to-end: the Python module gives the file output's values bit for bit.

For each input file written by scripts/make_ssh.py, `seatilt currents` writes
the reference; the same heights then go through
- seatilt.currents on numpy arrays (netCDF4-python's masked array, and
  NaN-filled float64 copies as a strided view and in Fortran order), and
- seatilt.xr.currents on the dataset opened by xarray (decoded, and packed
  data opened with mask_and_scale=False),
and every field must equal what netCDF4-python reads from the file, bit for
bit (NaN where the file holds _FillValue). The xarray result must carry the
file's dimensions, coordinates and attributes (as xarray reads the file).
The reference is the CLI's file output itself, computed by the same library:
these tests check that no value, flag or attribute changes on the way.
"""

import os
import sys
import tempfile
import unittest

import numpy as np
import netCDF4
import xarray as xr

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import python_util as pu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402
import e2e_util as eu  # noqa: E402

seatilt = None
ALL = eu.FLOAT_FIELDS + ["quality"]


def setUpModule():
    global seatilt
    seatilt = pu.import_seatilt()


def read_input(path):
    """(eta as netCDF4 masked array, lat, lon, name) of a make_ssh file."""
    with netCDF4.Dataset(path) as ds:
        name = [n for n, v in ds.variables.items() if "standard_name" in v.ncattrs()
                and v.standard_name.startswith("sea_surface_height")][0]
        return ds[name][:], ds["lat"][:].data, ds["lon"][:].data, name


class Equivalence(eu.SeatiltTestCase):

    def reference(self, fld, options, **write):
        """Write FLD, run the CLI with OPTIONS; return (input, output) paths."""
        src = self.path("in", "ssh.nc")
        make_ssh.write_ssh(src, fld, **write)
        out = self.path("out", "ssh_currents.nc")
        self.currents(src, out, *options, "--force")
        return src, out

    def check_numpy(self, src, out, kwargs, fields=ALL):
        eta, lat, lon, _ = read_input(src)
        ref = pu.read_file_vars(out, fields)
        got = seatilt.currents(eta, lat, lon, **kwargs)
        self.assertEqual(list(got), fields)
        for f in fields:
            pu.assert_bits_equal(self, ref[f], got[f], f"numpy masked {f}")
        # NaN-filled float64 as a strided view (every other column of a wider
        # array) and in Fortran order: read in place, same values.
        filled = np.ma.filled(eta.astype(np.float64), np.nan)
        wide = np.full(filled.shape[:-1] + (2 * filled.shape[-1],), 7.0)
        wide[..., ::2] = filled
        for layout, a in (("strided", wide[..., ::2]), ("fortran", np.asfortranarray(filled))):
            got = seatilt.currents(a, lat, lon, **kwargs)
            for f in fields:
                pu.assert_bits_equal(self, ref[f], got[f], f"numpy {layout} {f}")

    def check_xarray(self, src, out, kwargs, open_kwargs=None):
        with xr.open_dataset(src, **(open_kwargs or {})) as ds_in, xr.open_dataset(out) as ref:
            got = seatilt.xr.currents(ds_in, **kwargs)
            self.assertEqual(set(got.data_vars), set(ref.data_vars))
            for f in ref.data_vars:
                self.assertEqual(got[f].dims, ref[f].dims, f)
                pu.assert_bits_equal(self, ref[f].values, got[f].values, f"xarray {f}")
                self.assertTrue(pu.attrs_equal(ref[f].attrs, got[f].attrs),
                                f"{f}: {ref[f].attrs} != {got[f].attrs}")
            for c in ref.coords:
                np.testing.assert_array_equal(ref[c].values, got[c].values)
                self.assertTrue(pu.attrs_equal(ref[c].attrs, got[c].attrs),
                                f"{c}: {ref[c].attrs} != {got[c].attrs}")
            file_attrs = dict(ref.attrs)
            self.assertEqual(file_attrs.pop("seatilt_status"), "complete")
            for k in ("history", "date_created"):  # the call and the clock differ
                self.assertIn(k, got.attrs)
                file_attrs.pop(k)
            mem_attrs = {k: v for k, v in got.attrs.items() if k not in ("history", "date_created")}
            self.assertTrue(pu.attrs_equal(file_attrs, mem_attrs),
                            f"global attributes differ:\n{file_attrs}\n{mem_attrs}")
            self.assertIn("seatilt.xr.currents(", got.attrs["history"])
            return got

    def test_analytic_eddy(self):
        # One Gaussian eddy (make_ssh.eddy_field), two steps, f-plane.
        one = make_ssh.eddy_field(lat0=35.0, lon0=-40.0, step=0.1, half_width=3.0)
        fld = make_ssh.SshField(one.lat, one.lon, np.concatenate([one.eta, -0.5 * one.eta]),
                                make_ssh.daily_times(one.times[0], 2), title=one.title)
        for options, kwargs in (
                ([], {}),
                (["--order", "4", "--earth", "sphere", "--gravity", "wgs84"],
                 dict(order=4, earth="sphere", gravity="wgs84"))):
            with self.subTest(options=options):
                src, out = self.reference(fld, options)
                self.check_numpy(src, out, kwargs)
                self.check_xarray(src, out, kwargs)

    def test_global_grid_with_land_and_seam(self):
        # Global periodic 1-degree anomaly with land straddling 0/360 (make_ssh.pair_field).
        fld = make_ssh.pair_field(step=1.0)
        options = ["--order", "6", "--equator", "beta", "--equator-band", "4",
                   "--fields", "u,v,vorticity,okubo_weiss", "--gravity", "9.81"]
        kwargs = dict(order=6, equator="beta", equator_band=4, fields=["u", "v", "vorticity",
                      "okubo_weiss"], gravity=9.81)
        src, out = self.reference(fld, options)
        fields = ["u", "v", "vorticity", "okubo_weiss", "quality"]
        self.check_numpy(src, out, kwargs, fields)
        self.check_xarray(src, out, kwargs)

    def test_global_grid_with_poles_coast_mask_no_time(self):
        # Latitudes -90..90 with pole rows (masked_pole), 2-D file without time.
        fld = make_ssh.wave_field(step=2.0, with_poles=True)
        src, out = self.reference(fld, ["--coast", "mask", "--equator", "mask"], no_time=True)
        kwargs = dict(coast="mask", equator="mask")
        self.check_numpy(src, out, kwargs)
        got = self.check_xarray(src, out, kwargs)
        self.assertEqual(got["u"].dims, ("lat", "lon"))
        self.assertTrue((got["quality"].values[0] & 32).all())  # pole row flagged

    def test_packed_cm_undecoded_and_decoded(self):
        # int16 in cm with scale_factor/add_offset (make_ssh.write_pair): opened
        # with mask_and_scale=False the library unpacks exactly like the reader.
        p_in, f_in = self.path("in", "packed.nc"), self.path("in", "float.nc")
        make_ssh.write_pair(p_in, f_in, step=2.0)
        out = self.path("out", "packed_currents.nc")
        self.currents(p_in, out)
        self.check_xarray(p_in, out, {}, dict(mask_and_scale=False))
        # Decoded by xarray (float32 arithmetic): same masks, values within float32 rounding.
        ref = pu.read_file_vars(out, ["u", "quality"])
        with xr.open_dataset(p_in) as ds:
            got = seatilt.xr.currents(ds, fields="u")
        np.testing.assert_array_equal(ref["quality"], got["quality"].values)
        np.testing.assert_allclose(got["u"].values, ref["u"], rtol=1e-3, atol=1e-6)

    def test_dataarray_float64_and_netcdf_roundtrip(self):
        fld = make_ssh.eddy_field(lat0=-30.0, lon0=150.0, step=0.2, half_width=3.0,
                                  descending=True)
        src, out = self.reference(fld, ["--fields", "u,speed"])
        ref = pu.read_file_vars(out, ["u", "speed", "quality"])
        with xr.open_dataset(src) as ds:
            da = ds["sea_height"]
            got = seatilt.xr.currents(da, fields="u,speed")
            pu.assert_bits_equal(self, ref["u"], got["u"].values, "DataArray u")
            g64 = seatilt.xr.currents(da, fields="u,speed", dtype="float64")
            self.assertEqual(g64["u"].dtype, np.float64)
            # float64 results round to the file's float32 values.
            pu.assert_bits_equal(self, ref["speed"], g64["speed"].values.astype(np.float32),
                                 "float64 speed")
            # Written by xarray, read back: the file output's values and attributes.
            with tempfile.TemporaryDirectory() as tmp:
                path = os.path.join(tmp, "mem.nc")
                got.to_netcdf(path)
                with xr.open_dataset(path) as back, xr.open_dataset(out) as fref:
                    for f in ("u", "speed", "quality"):
                        pu.assert_bits_equal(self, fref[f].values, back[f].values, f"roundtrip {f}")
                        self.assertTrue(pu.attrs_equal(fref[f].attrs, back[f].attrs), f)
                        self.assertEqual(back[f].encoding.get("dtype"), fref[f].encoding.get("dtype"))

    def test_threads_give_identical_results(self):
        fld = make_ssh.pair_field(step=1.0)
        eta = np.where(np.isnan(fld.eta), np.nan, fld.eta)
        one = seatilt.currents(eta, fld.lat, fld.lon, threads=1, order=4)
        two = seatilt.currents(eta, fld.lat, fld.lon, threads=2, order=4)
        for f in ALL:
            pu.assert_bits_equal(self, one[f], two[f], f)


if __name__ == "__main__":
    unittest.main()
