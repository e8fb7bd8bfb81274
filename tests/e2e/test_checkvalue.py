#!/usr/bin/python3
"""End-to-end: handbook check values for the geostrophic slope-speed relation.

u = -(g/f) d(eta)/dy (geostrophic balance), f = 2 Omega sin(lat),
Omega = 7.292115e-5 rad s-1 (REFERENCES.md section 4).

A uniform meridional slope eta = s R1 (lat - lat0) is differentiated exactly
by any centred or one-sided difference (it is linear), so the only errors
are rounding: the input is stored as float64 and the output as float32
(relative 2^-24 = 6e-8). Tolerances are therefore set by the number of digits
of each published value, as stated beside it.
"""

import os
import sys
import unittest

import netCDF4
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402


class CheckValues(eu.SeatiltTestCase):

    def u_at(self, lat0, rise_m, per_km, *options, half_width=1.0, step=0.1, at=None):
        fld = make_ssh.slope_field(lat0, rise_m, per_km, "north", step, half_width)
        inp = make_ssh.write_ssh(self.path("in", f"slope_{lat0:g}_{rise_m:g}_{half_width:g}.nc"),
                                 fld, dtype="f8")
        self.runs = getattr(self, "runs", 0) + 1
        out = self.path("out", f"slope_{self.runs}.nc")
        self.currents(inp, out, *options)
        d = eu.read_vars(out, ["lat", "u", "v", "quality"])
        rows = {}
        for target in (at or [lat0]):
            j = int(np.argmin(np.abs(d["lat"] - target)))
            self.assertEqual(d["lat"][j], target)
            u_row, v_row = d["u"][0, j], d["v"][0, j]
            self.assertTrue(np.all(np.isfinite(u_row)))
            # a pure meridional slope has no zonal gradient: v = 0 (up to rounding)
            self.assertLess(np.max(np.abs(v_row)), 1e-6)
            # uniform across the row, edges included (a linear field has no stencil error)
            self.assertLess(np.ptp(u_row), 1e-6 * np.max(np.abs(u_row)) + 1e-9)
            rows[target] = float(np.mean(u_row))
        return rows, out

    def test_one_metre_per_100km_at_45N(self):
        # REFERENCES.md section 5 [computed]: 1 m rise per 100 km at 45N -> 0.9509 m/s;
        # exact: g0 * 1e-5 / f(45) = 9.80665e-5 / 1.031261e-4 = 0.950937 m/s.
        # Sea surface rising northward -> westward flow in the northern hemisphere.
        rows, _ = self.u_at(45.0, 1.0, 100.0, "--earth", "sphere", "--gravity", "standard")
        u = rows[45.0]
        self.assertLess(u, 0.0, "a northward rise must drive a westward current at 45N")
        self.assertAlmostEqual(abs(u), 0.9509, delta=0.00005)   # published to 4 decimals
        expected = make_ssh.G0 * 1e-5 / make_ssh.coriolis(45.0)
        self.assertAlmostEqual(abs(u), expected, delta=2e-6 * expected)

    def test_stewart_10cm_per_s_at_30(self):
        # Stewart, Introduction to Physical Oceanography, ch. 10: a 10 cm/s surface current
        # at 30 degrees goes with a 7.4 cm rise per 100 km. With g0 the exact rise is
        # 7.4359 cm (REFERENCES.md section 5 [computed]).
        rows, _ = self.u_at(30.0, 0.074, 100.0, "--earth", "sphere", "--gravity", "standard")
        self.assertAlmostEqual(abs(rows[30.0]), 0.10, delta=0.005)   # handbook: 2 significant digits
        rows, _ = self.u_at(30.0, 0.074359, 100.0, "--earth", "sphere", "--gravity", "standard")
        self.assertAlmostEqual(abs(rows[30.0]), 0.1000, delta=0.00005)  # 5 significant digits of 7.4359
        # southern hemisphere: f < 0, the same northward rise drives an eastward current
        rows, _ = self.u_at(-30.0, 0.074359, 100.0, "--earth", "sphere")
        self.assertAlmostEqual(rows[-30.0], 0.1000, delta=0.00005)

    def test_gravity_models_ratio(self):
        # --gravity wgs84 uses the Somigliana normal gravity at each latitude
        # (NIMA TR8350.2 3rd ed., Eq. 4-1): gamma(30) = 9.79324727, gamma(45) = 9.80619777,
        # gamma(60) = 9.81917695 m s-2 (REFERENCES.md section 4 [computed]); u scales with g,
        # so u_standard / u_wgs84 = 9.80665 / gamma(lat). Same input for all runs, so input
        # rounding cancels; float32 output allows 2 x 2^-24 relative: tolerance 2.5e-7.
        targets = [30.0, 45.0, 60.0]
        gamma = {30.0: 9.79324727, 45.0: 9.80619777, 60.0: 9.81917695}
        common = dict(half_width=16.0, step=0.5, at=targets)
        std, out_std = self.u_at(45.0, 0.05, 100.0, "--earth", "sphere", "--gravity", "standard", **common)
        wgs, out_wgs = self.u_at(45.0, 0.05, 100.0, "--earth", "sphere", "--gravity", "wgs84", **common)
        num, out_num = self.u_at(45.0, 0.05, 100.0, "--earth", "sphere", "--gravity", "9.8", **common)
        for lat in targets:
            with self.subTest(lat=lat):
                self.assertAlmostEqual(std[lat] / wgs[lat], 9.80665 / gamma[lat], delta=2.5e-7)
                self.assertAlmostEqual(std[lat] / num[lat], 9.80665 / 9.8, delta=2.5e-7)
        with netCDF4.Dataset(out_std) as ds:
            self.assertEqual(ds.geostrophy_gravity, "standard 9.80665 m s-2")
        with netCDF4.Dataset(out_wgs) as ds:
            self.assertEqual(ds.geostrophy_gravity, "wgs84 normal gravity")
        with netCDF4.Dataset(out_num) as ds:
            self.assertRegex(ds.geostrophy_gravity, r"^9\.80*\s+m s-2$")

    def test_earth_models_ratio(self):
        # --earth wgs84 divides by the meridional radius of curvature M instead of R1:
        # u_sphere / u_wgs84 = M(lat) / R1 for the same slope per radian of latitude.
        # M(45) = 6367381.816 m from M = a(1-e2)/(1-e2 sin2)^1.5 (NIMA TR8350.2;
        # per degree 111131.777 m, REFERENCES.md section 4 [computed]).
        sph, _ = self.u_at(45.0, 1.0, 100.0, "--earth", "sphere")
        ell, _ = self.u_at(45.0, 1.0, 100.0, "--earth", "wgs84")
        m45 = 111131.777 * 180.0 / np.pi
        self.assertAlmostEqual(sph[45.0] / ell[45.0], m45 / make_ssh.R1, delta=3e-7)


if __name__ == "__main__":
    unittest.main(verbosity=2)
