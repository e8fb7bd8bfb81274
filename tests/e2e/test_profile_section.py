#!/usr/bin/python3
"""`seatilt profile --section`: cross-section velocity and full-depth transport against
a hand integration.

The closed-form velocities of profile_data.analytic_case (density linear in latitude and
longitude, heights linear) are summed by hand along a meridian of the grid: samples on
the grid nodes (spacing = the latitude step on the R1 sphere), normal velocity -u
(walking north, positive to the left = west), segment length R1 dphi, trapezoid in z.
"""

import math
import os
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import profile_data as pd  # noqa: E402

STEP_M = pd.R1 * math.radians(0.5)   # 0.5 degree of the R1 sphere (m)
LINE = "-35 31, -35 39"              # a meridian of the grid, walking north


class ProfileSection(eu.SeatiltTestCase):

    def profile(self, *args, expect=0):
        proc = eu.run(["profile", *args])
        self.assertEqual(proc.returncode, expect, "unexpected exit code" + eu.describe(proc))
        return proc

    def files(self, floor=None):
        c = pd.analytic_case()
        mask = None
        if floor is not None:
            mask = np.broadcast_to((c["depth"] > floor)[:, None, None],
                                   (c["depth"].size, c["lat"].size, c["lon"].size))
        hyd = pd.write_hydro(self.path("rho.nc"), c["lat"], c["lon"], c["depth"],
                             {"rho": ("rho", c["rho"])}, fill_mask=mask)
        ssh = pd.write_heights(self.path("ssh.nc"), c["lat"], c["lon"], c["eta"])
        return c, hyd, ssh

    def hand(self, c, floor=None):
        """Hand integration along the meridian: per level sum(-u ds), and
        sum(ds * trapezoid of -u over the levels down to the floor)."""
        lat = np.arange(31.0, 39.0 + 0.25, 0.5)
        j = [int(round((x - c["lat"][0]) / 0.5)) for x in lat]
        depth = c["depth"] if floor is None else c["depth"][c["depth"] <= floor]
        un = np.array([[-c["u"](-d)[jj, 0] for jj in j] for d in depth])  # u is zonally uniform
        seg = 0.5 * (un[:, 1:] + un[:, :-1])                                # (levels, segments)
        per_depth = (seg * STEP_M).sum(axis=1)
        z = -depth
        column = (0.5 * (seg[1:] + seg[:-1]) * (z[:-1] - z[1:])[:, None]).sum(axis=0)
        return per_depth, (column * STEP_M).sum(), seg

    def run_section(self, hyd, ssh, line=LINE, name="s.nc", *extra):
        out = self.path(name)
        self.profile(ssh, "--density", hyd, "-o", out, "--earth", "sphere", "--section", line,
                     "--section-name", "Verrand meridian", "--section-spacing",
                     repr(STEP_M * 1.000001), *extra)
        return out

    def test_transport_matches_hand_integration(self):
        c, hyd, ssh = self.files()
        out = self.run_section(hyd, ssh)
        per_depth, total, seg = self.hand(c)
        with netCDF4.Dataset(out) as ds:
            self.assertEqual(ds.dimensions["section_distance"].size, 16)
            np.testing.assert_allclose(ds["section_lat"][:], np.arange(31.25, 39.0, 0.5), atol=1e-9)
            np.testing.assert_allclose(ds["section_distance"][:], STEP_M * (np.arange(16) + 0.5),
                                       rtol=1e-12)
            np.testing.assert_allclose(ds["section_transport_per_depth"][:], per_depth, rtol=1e-9)
            np.testing.assert_allclose(float(ds["section_transport"][...]), total, rtol=1e-9)
            self.assertEqual(ds["section_transport"].standard_name,
                             "ocean_volume_transport_across_line")
            np.testing.assert_allclose(ds["section_normal_velocity"][:], seg, rtol=2e-7, atol=1e-9)
            self.assertEqual(ds.section_name, "Verrand meridian")

    def test_sea_floor_limits_the_integral_and_direction_flips_the_sign(self):
        c, hyd, ssh = self.files(floor=400.0)
        a = self.run_section(hyd, ssh, LINE, "north.nc")
        b = self.run_section(hyd, ssh, "-35 39, -35 31", "south.nc")
        per_depth, total, _ = self.hand(c, floor=400.0)
        with netCDF4.Dataset(a) as da, netCDF4.Dataset(b) as db:
            ta, tb = float(da["section_transport"][...]), float(db["section_transport"][...])
            tpd = np.ma.filled(da["section_transport_per_depth"][:], np.nan)
        np.testing.assert_allclose(ta, total, rtol=1e-9)
        np.testing.assert_allclose(tb, -ta, rtol=1e-12)
        np.testing.assert_allclose(tpd[:per_depth.size], per_depth, rtol=1e-9)
        self.assertTrue(np.all(np.isnan(tpd[per_depth.size:])))   # below the floor: fill

    def test_section_errors(self):
        c, hyd, ssh = self.files()
        out = self.path("bad.nc")
        proc = eu.run(["profile", ssh, "--density", hyd, "-o", out, "--section", LINE,
                       "--levels", "0,100"])
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        self.assert_one_error_line(proc, "--levels")
        proc = eu.run(["profile", ssh, "--density", hyd, "-o", out, "--section", "-35 31, -35 60"])
        self.assertEqual(proc.returncode, 3, eu.describe(proc))
        self.assert_one_error_line(proc, "outside the grid")
        proc = eu.run(["profile", ssh, "--density", hyd, "-o", out, "--section", "-35 31"])
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        self.assertFalse(os.path.exists(out))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])


if __name__ == "__main__":
    unittest.main()
