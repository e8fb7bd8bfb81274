#!/usr/bin/python3
"""End-to-end: `seatilt currents` on projected and curvilinear grids against
analytic velocities (docs/projected.md).

An eddy and an eastward jet defined in latitude/longitude are sampled at the
nodes of polar stereographic grids near 75 N (EPSG:3413 parameters) and 70 S
(EPSG:3031), of a LAEA grid (EPSG:3035 parameters, x/y in km) and of a grid
given only by 2-D latitude/longitude; node positions come from pyproj
(Debian python3-pyproj). Expected u, v are the closed-form geostrophic
velocities of tests/e2e/projected_data.py (WGS84 radii, NIMA TR8350.2).
"""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import projected_data as pd  # noqa: E402


class ProjectedAnalytic(eu.SeatiltTestCase):

    def run_case(self, mapping, lat0, lon0, field, *, half=30, step=10000.0, order=4,
                 xy_units="m", time=False, extra=()):
        x, y = pd.grid_around(mapping, lat0, lon0, half, step)
        lat, lon = pd.node_lat_lon(mapping, x, y)
        src, out = self.path("in.nc"), self.path("out.nc")
        pd.write_projected(src, mapping, x, y, field.eta(lat, lon), xy_units=xy_units, time=time)
        self.currents(src, out, "--order", str(order), "--force", *extra)
        got = eu.read_vars(out, ["u", "v", "quality", "vorticity"])
        a, e2 = pd.ellipsoid(mapping)
        ue, ve = field.uv(lat, lon, a, e2)
        return got, ue, ve, lat, lon

    def check_eddy(self, mapping, lat0, lon0, **kw):
        got, ue, ve, _, _ = self.run_case(mapping, lat0, lon0, pd.Eddy(lat0, lon0), **kw)
        q = got["quality"]
        u, v = got["u"], got["v"]
        if u.ndim == 3:
            self.assertTrue(np.array_equal(u[0], u[1], equal_nan=True))
            u, v, q = u[0], v[0], q[0]
        # 5-point stencils: the two outer rings are one-sided/shortened, the rest full.
        inner = np.zeros(q.shape, bool)
        inner[2:-2, 2:-2] = True
        self.assertTrue(np.all(q[inner] == 0), "interior cells carry quality bits")
        self.assertTrue(np.all((q[~inner] & 1) == 1), "edge cells are one-sided")
        speed = np.hypot(ue, ve).max()
        self.assertGreater(speed, 0.1)
        # 5-point stencil at 10 km on a ~96 km eddy: truncation error well under
        # 0.1 % of the top speed (float32 storage: 1e-7 relative).
        self.assertLess(np.nanmax(np.abs(u - ue)[inner]), 1e-3 * speed)
        self.assertLess(np.nanmax(np.abs(v - ve)[inner]), 1e-3 * speed)

    def check_jet(self, mapping, lat0, lon0, **kw):
        got, ue, ve, _, _ = self.run_case(mapping, lat0, lon0, pd.Jet(), **kw)
        q, u, v = got["quality"], got["u"], got["v"]
        ok = q == 0
        self.assertGreater(ok.sum(), 0.8 * q.size)
        # Rotation check: a purely eastward flow has v = 0 (to truncation and float32).
        self.assertLess(np.max(np.abs(v[ok]) / np.abs(ue[ok])), 1e-5)
        self.assertLess(np.max(np.abs(u[ok] / ue[ok] - 1)), 1e-5)

    def test_polar_stereographic_north_75N(self):
        self.check_eddy(pd.POLAR_NORTH, 75.0, 30.0)
        self.check_jet(pd.POLAR_NORTH, 75.0, 30.0)

    def test_polar_stereographic_north_with_time(self):
        self.check_eddy(pd.POLAR_NORTH, 80.0, -120.0, time=True, half=24)

    def test_polar_stereographic_south_70S(self):
        self.check_eddy(pd.POLAR_SOUTH, -70.0, 140.0)
        self.check_jet(pd.POLAR_SOUTH, -70.0, 140.0)

    def test_laea_in_km(self):
        # x, y and the false easting/northing in km (CF Appendix F).
        self.check_eddy(pd.LAEA_EUROPE, 55.0, 3.0, xy_units="km")
        self.check_jet(pd.LAEA_EUROPE, 55.0, 3.0, xy_units="km")

    def test_pole_node_masked(self):
        got, ue, _, lat, _ = self.run_case(pd.POLAR_NORTH, 90.0, 0.0, pd.Jet(), half=10)
        q = got["quality"]
        self.assertEqual(q[10, 10], eu.BIT["pole"])
        self.assertTrue(np.isnan(got["u"][10, 10]))
        ok = q == 0
        self.assertLess(np.max(np.abs(got["v"][ok]) / np.abs(ue[ok])), 1e-5)

    def test_curvilinear_2d_lat_lon(self):
        # The Antarctic grid given only by 2-D latitude/longitude (no grid mapping):
        # local metric from the node positions; same analytic answer.
        x, y = pd.grid_around(pd.POLAR_SOUTH, -70.0, 140.0, 30, 10000.0)
        lat, lon = pd.node_lat_lon(pd.POLAR_SOUTH, x, y)
        eddy = pd.Eddy(-70.0, 140.0)
        src, out = self.path("curv.nc"), self.path("curv_out.nc")
        pd.write_curvilinear(src, lat, lon, eddy.eta(lat, lon))
        self.currents(src, out, "--order", "4")
        got = eu.read_vars(out, ["u", "v", "quality", "nav_lat", "nav_lon"])
        ue, ve = eddy.uv(lat, lon, pd.WGS84_A, pd.ellipsoid(pd.POLAR_NORTH)[1])
        inner = np.zeros(lat.shape, bool)
        inner[2:-2, 2:-2] = True
        self.assertTrue(np.all(got["quality"][inner] == 0))
        speed = np.hypot(ue, ve).max()
        self.assertLess(np.max(np.abs(got["u"] - ue)[inner]), 1e-3 * speed)
        self.assertLess(np.max(np.abs(got["v"] - ve)[inner]), 1e-3 * speed)
        np.testing.assert_allclose(got["nav_lat"], lat, atol=1e-12)
        np.testing.assert_allclose(got["nav_lon"], lon, atol=1e-12)


if __name__ == "__main__":
    unittest.main()
