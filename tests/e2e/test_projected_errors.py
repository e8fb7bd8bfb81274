#!/usr/bin/python3
"""End-to-end: bad projected inputs fail with exit 3, one error line naming file,
variable and problem, and nothing at the output path (README "Exit codes";
CF 1.12 section 5.6 and Appendix F for what is valid)."""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import projected_data as pd  # noqa: E402


class ProjectedErrors(eu.SeatiltTestCase):

    def write(self, mapping, name="in.nc", **kw):
        x, y = pd.grid_around(pd.POLAR_NORTH, 76.0, 10.0, 6, 25000.0)
        lat, lon = pd.node_lat_lon(pd.POLAR_NORTH, x, y)
        src = self.path(name)
        pd.write_projected(src, mapping, x, y, pd.Jet().eta(lat, lon), **kw)
        return src, lat, lon

    def refused(self, src, *mentions):
        out = self.path("out", "result.nc")
        proc = self.currents(src, out, expect=3)
        line = self.assert_one_error_line(proc, src)
        for m in mentions:
            self.assertIn(m, line)
        self.assertFalse(os.path.exists(out))
        self.assertEqual(eu.temp_leftovers(os.path.dirname(out)), [])
        return line

    def test_unknown_grid_mapping_name(self):
        m = dict(pd.POLAR_NORTH, grid_mapping_name="polar_stereo")
        src, *_ = self.write(m)
        self.refused(src, "variable crs", 'unknown grid_mapping_name "polar_stereo"')

    def test_polar_origin_not_at_a_pole(self):
        m = dict(pd.POLAR_NORTH, latitude_of_projection_origin=60.0)
        src, *_ = self.write(m)
        self.refused(src, "variable crs", "latitude_of_projection_origin +90 or -90")

    def test_scale_factor_and_standard_parallel_disagree(self):
        m = dict(pd.POLAR_NORTH, scale_factor_at_projection_origin=0.99)
        src, *_ = self.write(m)
        self.refused(src, "variable crs", "disagree")

    def test_lat_lon_disagree_with_the_mapping(self):
        # 2-D lat/lon computed with another central meridian than the mapping's.
        x, y = pd.grid_around(pd.POLAR_NORTH, 76.0, 10.0, 6, 25000.0)
        other = dict(pd.POLAR_NORTH, straight_vertical_longitude_from_pole=-40.0)
        lat, lon = pd.node_lat_lon(other, x, y)
        src = self.path("in.nc")
        pd.write_projected(src, pd.POLAR_NORTH, x, y, pd.Jet().eta(lat, lon), latlon=(lat, lon))
        self.refused(src, "disagree")

    def test_projected_without_grid_mapping(self):
        src, *_ = self.write(pd.POLAR_NORTH, grid_mapping_attr="")
        self.refused(src, "variable adt", "grid_mapping")

    def test_grid_mapping_variable_missing(self):
        src, *_ = self.write(pd.POLAR_NORTH, grid_mapping_attr="nowhere")
        self.refused(src, "variable adt", "nowhere")

    def test_crs_wkt_alone_is_enough(self):
        # The same CRS as WKT only (pyproj to_wkt), no grid_mapping_name: accepted,
        # same velocities as from the CF attributes.
        wkt = pd.crs_of(pd.POLAR_NORTH).to_wkt()
        a, _, _ = self.write(pd.POLAR_NORTH, name="cf.nc")
        b, _, _ = self.write({"crs_wkt": wkt}, name="wkt.nc")
        self.currents(a, self.path("a.nc"))
        self.currents(b, self.path("b.nc"))
        ua = eu.read_vars(self.path("a.nc"), ["u"])["u"]
        ub = eu.read_vars(self.path("b.nc"), ["u"])["u"]
        np.testing.assert_allclose(ua, ub, rtol=1e-6, atol=0)


if __name__ == "__main__":
    unittest.main()
