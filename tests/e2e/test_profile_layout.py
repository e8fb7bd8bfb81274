#!/usr/bin/python3
"""`seatilt profile`: sea floor, equatorial band, time steps, grids and layouts.

Data: tests/e2e/profile_data.py (the invented Verrand Basin). Expected flags follow
the documented bit values (docs/profile.md); fill is the netCDF default float fill.
"""

import os
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import profile_data as pd  # noqa: E402

ONE_SIDED, MISSING, EQUATOR, NO_GRADIENT, NO_REFERENCE = 1, 8, 16, 64, 128


class ProfileLayout(eu.SeatiltTestCase):

    def profile(self, *args, expect=0):
        proc = eu.run(["profile", *args])
        self.assertEqual(proc.returncode, expect, "unexpected exit code" + eu.describe(proc))
        return proc

    def ts_files(self, lat=None, lon=None, depth=(0.0, 25.0, 75.0, 150.0, 300.0, 600.0, 1200.0),
                 fill_mask=None, hyd_times=None, **kw):
        c = pd.ts_case(depth, lat, lon)
        pt, sp = c["pt"], c["sp"]
        if hyd_times is not None:
            pt = np.stack([pt + 0.5 * k for k in range(len(hyd_times))])
            sp = np.stack([sp] * len(hyd_times))
        hyd = pd.write_hydro(self.path("ts.nc"), c["lat"], c["lon"], c["depth"],
                             {"theta": ("pt", pt), "salt": ("sp", sp)}, fill_mask=fill_mask,
                             times=hyd_times, **kw)
        return c, hyd

    def test_sea_floor_is_fill(self):
        lat, lon = pd.grid()
        depth = np.array([0.0, 50.0, 100.0, 200.0, 500.0, 800.0, 1200.0])
        below = pd.shelf_mask(lat, lon, depth)
        c, hyd = self.ts_files(lat, lon, depth, fill_mask=below)
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, pd.jet_heights(lat, lon))
        out = self.path("out.nc")
        self.profile(ssh, "--density", hyd, "-o", out, "--fields", "density")
        with netCDF4.Dataset(out) as ds:
            u = ds["u"]
            u.set_auto_mask(False)
            raw = u[:]
            q = ds["quality"][:].astype(np.int64)
            dens = np.ma.filled(ds["density"][:], np.nan)
        self.assertFalse(np.isnan(raw).any(), "NaN written instead of _FillValue")
        is_fill = raw == eu.FILL
        np.testing.assert_array_equal(is_fill, below, "fill exactly below the sea floor")
        np.testing.assert_array_equal((q & MISSING) != 0, below)
        np.testing.assert_array_equal(np.isnan(dens), below)
        # Water next to the slope at depth uses one-sided differences (flag bit 1).
        self.assertTrue(np.any(((q & ONE_SIDED) != 0) & ~below & (np.arange(depth.size) >= 3)[:, None, None]))
        with netCDF4.Dataset(out) as ds:
            self.assertEqual(list(ds["quality"].flag_masks), [1, 8, 16, 32, 64, 128])

    def test_equatorial_band_masked(self):
        lat, lon = pd.grid(-12.0, 12.0, 0.0, 8.0, 1.0)
        c, hyd = self.ts_files(lat, lon)
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, pd.jet_heights(lat, lon))
        out = self.path("eq.nc")
        self.profile(ssh, "--density", hyd, "-o", out, "--equator-band", "4")
        r = eu.read_vars(out, ["u", "quality"])
        band = np.abs(lat) < 4.0
        self.assertTrue(np.all(np.isnan(r["u"][:, band, :])))
        self.assertTrue(np.all(r["quality"][:, band, :] == EQUATOR))
        self.assertTrue(np.all(np.isfinite(r["u"][:, ~band, :])))

    def test_one_hydrography_step_serves_every_height_step(self):
        lat, lon = pd.grid()
        c, hyd = self.ts_files(lat, lon)
        times = pd.times(3)
        eta = np.stack([pd.jet_heights(lat, lon) * (1.0 + 0.1 * k) for k in range(3)])
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, eta, times=times)
        out = self.path("t.nc")
        self.profile(ssh, "--density", hyd, "-o", out)
        with netCDF4.Dataset(out) as ds:
            self.assertEqual(ds["u"].dimensions, ("time", "depth", "lat", "lon"))
            self.assertTrue(ds.dimensions["time"].isunlimited())
            dates = netCDF4.num2date(ds["time"][:], ds["time"].units, ds["time"].calendar)
            self.assertEqual([d.strftime("%Y-%m-%d") for d in dates],
                             ["2033-06-01", "2033-06-02", "2033-06-03"])
            u = np.ma.filled(ds["u"][:], np.nan)
            us = np.ma.filled(ds["u_surface"][:], np.nan)
        # Same shear every step: u(t) - u_surface(t) does not depend on t.
        d0 = u[0] - us[0][None]
        for k in (1, 2):
            np.testing.assert_allclose(u[k] - us[k][None], d0, rtol=0, atol=1e-6)
        self.assertFalse(np.allclose(us[0], us[2]))

    def test_mismatched_steps_are_refused(self):
        lat, lon = pd.grid()
        c, hyd = self.ts_files(lat, lon, hyd_times=pd.times(2))
        eta = np.stack([pd.jet_heights(lat, lon)] * 3)
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, eta, times=pd.times(3))
        out = self.path("bad.nc")
        proc = self.profile(ssh, "--density", hyd, "-o", out, expect=3)
        self.assert_one_error_line(proc, "time steps")
        self.assertFalse(os.path.exists(out))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])

    def test_paired_steps_and_a_coarser_height_grid(self):
        # Heights on a 1-degree grid, hydrography on 0.5 degrees: the surface velocity is
        # transferred bilinearly; paired time steps with equal dates.
        lat, lon = pd.grid()
        c, hyd = self.ts_files(lat, lon, hyd_times=pd.times(2))
        slat, slon = pd.grid(29.0, 41.0, -41.0, -29.0, 1.0)
        phi, lam = pd.mesh(slat, slon)
        eta = np.stack([-2.0 * phi + 0.5 * lam, -2.5 * phi + 0.5 * lam])  # linear: exact transfer
        ssh = pd.write_heights(self.path("ssh.nc"), slat, slon, eta, times=pd.times(2))
        out = self.path("pair.nc")
        self.profile(ssh, "--density", hyd, "-o", out, "--earth", "sphere")
        r = eu.read_vars(out, ["u_surface", "v_surface"])
        # On the height grid the velocity of a linear height is exact (centred differences);
        # it varies with latitude only (1/f, 1/cos), so the bilinear transfer is linear
        # interpolation in latitude between the 1-degree rows (numpy.interp).
        fs = pd.coriolis(slat)
        for k, b in enumerate((-2.0, -2.5)):
            us = -pd.G0 * b / (fs * pd.R1)
            vs = pd.G0 * 0.5 / (fs * pd.R1 * np.cos(np.radians(slat)))
            np.testing.assert_allclose(r["u_surface"][k], np.interp(lat, slat, us)[:, None]
                                       * np.ones((1, lon.size)), rtol=1e-6)
            np.testing.assert_allclose(r["v_surface"][k], np.interp(lat, slat, vs)[:, None]
                                       * np.ones((1, lon.size)), rtol=1e-6)
        with netCDF4.Dataset(out) as ds:
            self.assertIn("interpolated", ds.input_height_grid)

    def test_height_levels_positive_up_and_descending(self):
        # A vertical coordinate "z" positive up (0, -25, ...) and a float32 file: same result
        # as depth positive down.
        lat, lon = pd.grid()
        c, hyd_d = self.ts_files(lat, lon)
        c2 = pd.ts_case(c["depth"][::-1], lat, lon)
        hyd_h = pd.write_hydro(self.path("ts_up.nc"), lat, lon, c2["depth"],
                               {"theta": ("pt", c2["pt"]), "salt": ("sp", c2["sp"])},
                               vertical="height", var_dtype="f4")
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, pd.jet_heights(lat, lon))
        a, b = self.path("a.nc"), self.path("b.nc")
        self.profile(ssh, "--density", hyd_d, "-o", a)
        self.profile(ssh, "--density", hyd_h, "-o", b)
        ra, rb = eu.read_vars(a, ["u"]), eu.read_vars(b, ["u"])
        np.testing.assert_allclose(rb["u"][::-1], ra["u"], rtol=0, atol=2e-5)  # float32 T/S input
        with netCDF4.Dataset(b) as ds:
            np.testing.assert_array_equal(ds["z"][:], -c2["depth"])
            self.assertEqual(ds["z"].positive, "up")


if __name__ == "__main__":
    unittest.main()
