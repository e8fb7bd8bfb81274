#!/usr/bin/python3
"""`seatilt profile`: thermal-wind velocities against closed forms and python3-gsw.

Check values come from outside seatilt: closed-form integrals of the thermal-wind
relation for a density linear in latitude/longitude (and linear in z), python3-gsw
(Debian) for TEOS-10 density, and an independent numpy re-computation of the
differences and the trapezoidal sum. Data: tests/e2e/profile_data.py (invented basin).
"""

import os
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import profile_data as pd  # noqa: E402


def load(path, *names):
    out = {}
    with netCDF4.Dataset(path) as ds:
        for n in names:
            a = ds.variables[n][:]
            out[n] = (np.ma.getdata(a).astype(np.int64) if n == "quality"
                      else np.ma.filled(np.ma.asarray(a, dtype=np.float64), np.nan))
    return out


class ProfileAnalytic(eu.SeatiltTestCase):

    def profile(self, *args, expect=0):
        proc = eu.run(["profile", *args])
        self.assertEqual(proc.returncode, expect, "unexpected exit code" + eu.describe(proc))
        return proc

    def test_linear_density_gives_the_closed_form(self):
        # rho' = c0 + (A phi + C lambda)(1 + z/H): shear linear in z, so the trapezoid is
        # exact; u(z) = u_s + g A (z + z^2/2H)/(rho0 f R), v likewise (profile_data.analytic_case).
        c = pd.analytic_case()
        hyd = pd.write_hydro(self.path("rho.nc"), c["lat"], c["lon"], c["depth"],
                             {"rho": ("rho", c["rho"])})
        ssh = pd.write_heights(self.path("ssh.nc"), c["lat"], c["lon"], c["eta"])
        out = self.path("out.nc")
        self.profile(ssh, "--density", hyd, "-o", out, "--earth", "sphere", "--fields", "du_dz")
        r = load(out, "u", "v", "quality", "du_dz", "u_surface")
        for k, d in enumerate(c["depth"]):
            ue, ve = c["u"](-d), c["v"](-d)
            # float32 storage: 6e-8 relative (IEEE 754 binary32)
            np.testing.assert_allclose(r["u"][k], ue, rtol=2e-7, atol=1e-9, err_msg=f"u at {d} m")
            np.testing.assert_allclose(r["v"][k], ve, rtol=2e-7, atol=1e-9, err_msg=f"v at {d} m")
        # Sign (thermal wind, z up): A > 0, northern hemisphere -> du/dz > 0 at every level.
        self.assertTrue(np.all(r["du_dz"] > 0))
        np.testing.assert_allclose(r["u_surface"], c["us"], rtol=2e-7)
        # Linear fields: one-sided edges are exact too and only set bit 1.
        self.assertTrue(set(np.unique(r["quality"])) <= {0, 1})

    def test_levels_between_input_levels(self):
        # Output at 75 m and 550 m, between input levels: same closed form (the shear is
        # linear between levels, the trapezoid with interpolated shear is exact).
        c = pd.analytic_case()
        hyd = pd.write_hydro(self.path("rho.nc"), c["lat"], c["lon"], c["depth"],
                             {"rho": ("rho", c["rho"])})
        ssh = pd.write_heights(self.path("ssh.nc"), c["lat"], c["lon"], c["eta"])
        out = self.path("lv.nc")
        self.profile(ssh, "--density", hyd, "-o", out, "--earth", "sphere", "--levels", "25,75,550")
        r = load(out, "u", "v")
        with netCDF4.Dataset(out) as ds:
            np.testing.assert_array_equal(ds["depth"][:], [25.0, 75.0, 550.0])
            self.assertEqual(ds["depth"].positive, "down")
        for k, d in enumerate([25.0, 75.0, 550.0]):
            np.testing.assert_allclose(r["u"][k], c["u"](-d), rtol=2e-7, atol=1e-9)
            np.testing.assert_allclose(r["v"][k], c["v"](-d), rtol=2e-7, atol=1e-9)

    def test_temperature_salinity_against_gsw(self):
        # Practical salinity + potential temperature: density by python3-gsw
        # (SR_from_SP, CT_from_pt, p_from_z, rho), shear and integral re-computed with numpy.
        c = pd.ts_case()
        lat, lon, depth = c["lat"], c["lon"], c["depth"]
        hyd = pd.write_hydro(self.path("ts.nc"), lat, lon, depth,
                             {"theta": ("pt", c["pt"]), "salt": ("sp", c["sp"])})
        eta = pd.jet_heights(lat, lon)
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, eta)
        out = self.path("ts_out.nc")
        self.profile(ssh, "--density", hyd, "-o", out, "--earth", "sphere", "--fields", "density")
        r = load(out, "u", "v", "density", "quality")
        p = pd.pressure_of_depth(depth, lat)[:, :, None]
        anom, rho = pd.ts_density_anomaly(c["pt"], c["sp"], p)
        # seatilt's 75-term density vs gsw: float32 storage only (6e-8 relative)
        np.testing.assert_allclose(r["density"], rho, rtol=1e-7)
        us, vs = pd.surface_reference(lat, lon, eta)
        z = -np.repeat(depth[:, None], lat.size, axis=1)
        u, v = pd.thermal_wind_reference(lat, lon, z, anom, us, vs)
        inner = (slice(None), slice(1, -1), slice(1, -1))
        scale = np.nanmax(np.abs(u[inner]))
        self.assertGreater(scale, 0.05)
        np.testing.assert_allclose(r["u"][inner], u[inner], rtol=0, atol=2e-6 * scale)
        np.testing.assert_allclose(r["v"][inner], v[inner], rtol=0, atol=2e-6 * scale)
        self.assertTrue(np.all(r["quality"][inner] == 0))
        # The flow weakens with depth here (warm water south-west, jet at the surface).
        self.assertLess(np.nanmean(np.abs(r["u"][-1])), np.nanmean(np.abs(r["u"][0])))
        with netCDF4.Dataset(out) as ds:
            self.assertIn("SA = SR = (35.16504/35) SP", ds.input_salinity_variable)
            self.assertIn("CT_from_pt", ds.input_temperature_variable)
            self.assertEqual(ds.seatilt_status, "complete")
            self.assertIn("navigation", ds.comment)

    def test_uniform_hydrography_is_depth_independent(self):
        # Taylor-Proudman limit: temperature and salinity uniform along each pressure level
        # -> no density gradient along isobars -> u(z) = u_surface exactly at every level.
        lat, lon = pd.grid()
        pres = np.array([0.0, 50.0, 200.0, 500.0, 1500.0])
        shape = (pres.size, lat.size, lon.size)
        pt = np.broadcast_to((12.0 * np.exp(-pres / 400.0) + 3.0)[:, None, None], shape)
        sp = np.broadcast_to((34.6 + 0.4 * np.exp(-pres / 400.0))[:, None, None], shape)
        hyd = pd.write_hydro(self.path("flat.nc"), lat, lon, pres,
                             {"pt": ("pt", pt), "sp": ("sp", sp)}, vertical="pressure")
        ssh = pd.write_heights(self.path("ssh.nc"), lat, lon, pd.jet_heights(lat, lon))
        out = self.path("flat_out.nc")
        self.profile(ssh, "--density", hyd, "-o", out)
        r = load(out, "u", "v", "u_surface", "v_surface")
        for k in range(pres.size):
            np.testing.assert_array_equal(r["u"][k], r["u_surface"])
            np.testing.assert_array_equal(r["v"][k], r["v_surface"])
        self.assertTrue(np.all(np.isfinite(r["u"])))
        with netCDF4.Dataset(out) as ds:
            self.assertEqual(ds["pres"].units, "dbar")
            self.assertEqual(ds.geospatial_vertical_units, "dbar")

    def test_level_of_no_motion(self):
        # no-motion:600: u(600 m) = 0, and velocity differences between levels are those
        # of the surface-referenced run (the reference only adds a constant per column).
        c = pd.ts_case()
        hyd = pd.write_hydro(self.path("ts.nc"), c["lat"], c["lon"], c["depth"],
                             {"theta": ("pt", c["pt"]), "salt": ("sp", c["sp"])})
        ssh = pd.write_heights(self.path("ssh.nc"), c["lat"], c["lon"],
                               pd.jet_heights(c["lat"], c["lon"]))
        a, b = self.path("surf.nc"), self.path("lnm.nc")
        self.profile(ssh, "--density", hyd, "-o", a)
        self.profile("--density", hyd, "-o", b, "--reference", "no-motion:600")
        ra, rb = load(a, "u", "v"), load(b, "u", "v")
        k600 = list(c["depth"]).index(600.0)
        np.testing.assert_array_equal(rb["u"][k600], 0.0)
        np.testing.assert_array_equal(rb["v"][k600], 0.0)
        for name in ("u", "v"):
            da = ra[name] - ra[name][k600]
            np.testing.assert_allclose(rb[name], da, rtol=0, atol=1e-6)
        with netCDF4.Dataset(b) as ds:
            self.assertNotIn("u_surface", ds.variables)
            self.assertIn("no motion at 600 m", ds.thermal_wind_reference)


if __name__ == "__main__":
    unittest.main()
