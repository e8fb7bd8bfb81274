#!/usr/bin/python3
"""End-to-end: `seatilt quicklook` on projected and curvilinear grids
(docs/quicklook.md "Projected and curvilinear grids").

Inputs are written with the generators of tests/e2e/projected_data.py
(pyproj for the node positions, a reference outside seatilt): a north polar
stereographic grid (NSIDC EPSG:3413 parameters) of the invented "Skarvo
Drift", and the same nodes as a grid of 2-D latitude/longitude only. PNGs are
decoded by the independent decoder of quicklook_data.py (PNG specification +
zlib). Checks: the requested size; a pattern that is high where y > 0 in
projection coordinates lands in the top half; land (fill) is the neutral
grey (153, 153, 153); an eastward-balanced jet's arrows point along the
parallels as pyproj's forward projection says; --region on the grid.
"""

import os
import sys
import tempfile
import unittest

import numpy as np
import pyproj

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import projected_data as pd  # noqa: E402
import quicklook_data as qd  # noqa: E402
import quicklook_projected_data as qp  # noqa: E402

WIDTH = 480


class QuicklookProjected(eu.SeatiltTestCase):

    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        cls._shared = tempfile.TemporaryDirectory(prefix="seatilt-e2e-qlp-")
        d = cls._shared.name
        # 41 x 41 nodes, 75 km apart, centred on the pole.
        cls.x, cls.y = pd.grid_around(pd.POLAR_NORTH, 90.0, 0.0, 20, 75000.0)
        cls.lat, cls.lon = pd.node_lat_lon(pd.POLAR_NORTH, cls.x, cls.y)
        yy = np.broadcast_to(cls.y[:, None], cls.lat.shape)
        xx = np.broadcast_to(cls.x[None, :], cls.lat.shape)
        eta = 0.5 + 0.3 * yy / np.abs(cls.y).max()          # high where y > 0
        cls.land = (xx < -0.9e6) & (yy < -0.9e6)             # bottom-left corner
        eta = np.where(cls.land, np.nan, eta)
        cls.pattern = os.path.join(d, "skarvo_pattern.nc")
        pd.write_projected(cls.pattern, pd.POLAR_NORTH, cls.x, cls.y, eta)
        # The jet eta = A sin(lat): u = -(g/(f M)) A cos(lat) < 0 (westward), v = 0.
        jet = pd.Jet().eta(cls.lat, cls.lon)
        cls.jet = os.path.join(d, "skarvo_jet.nc")
        pd.write_projected(cls.jet, pd.POLAR_NORTH, cls.x, cls.y, jet)
        cls.jet_uv = os.path.join(d, "skarvo_jet_uv.nc")
        proc = eu.run(["currents", cls.jet, "-o", cls.jet_uv])
        assert proc.returncode == 0, eu.describe(proc)
        cls.curv = os.path.join(d, "skarvo_curvilinear.nc")
        pd.write_curvilinear(cls.curv, cls.lat, cls.lon, eta)

    @classmethod
    def tearDownClass(cls):
        cls._shared.cleanup()

    def quicklook(self, inp, out, *options, width=WIDTH):
        proc = eu.run(["quicklook", inp, "-o", out, "--verbose", "--width", width, *options])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        info = qd.parse_info(proc.stderr)
        window = qp.parse_window(proc.stderr)
        img = qd.read_png(out)
        self.assertEqual(img.shape[1], width)                   # requested width
        self.assertEqual((img.shape[1], img.shape[0]), (info["w"], info["h"]))
        self.assertEqual(eu.temp_leftovers(os.path.dirname(out)), [])
        return info, window, img

    def test_pattern_y_up_and_land_grey(self):
        info, window, img = self.quicklook(self.pattern, self.path("pattern.png"))
        self.assertEqual(window["name"], "polar_stereographic")
        self.assertEqual(info["scale"], "sequential")            # absolute height: viridis
        # The window is the cells' extent, half a spacing beyond the outer nodes.
        self.assertAlmostEqual(window["c0"], self.x.min() - 37500.0, delta=1.0)
        self.assertAlmostEqual(window["r1"], self.y.max() + 37500.0, delta=1.0)
        self.assertEqual(info["mw"], info["mh"])                  # a square grid stays square
        self.assertIn("graticule labels", info["line"])
        # High (viridis yellow: red > blue) above, low (purple: blue > green) below.
        for x in (-1.2e6, 0.3e6, 1.1e6):
            top = self.colour(img, info, window, x, 1.2e6)
            bottom = self.colour(img, info, window, x, -0.6e6)
            self.assertGreater(top[0], top[2] + 60, f"top at x={x}: {top}")
            self.assertGreater(bottom[2], bottom[1], f"bottom at x={x}: {bottom}")
            _, py_top = qp.pixel_of_xy(info, window, x, 1.2e6)
            self.assertLess(py_top, info["my"] + info["mh"] // 2)
        # Land: grey, in the bottom-left corner of the map.
        for x, y in ((-1.3e6, -1.2e6), (-1.05e6, -1.4e6)):
            px, py = qp.pixel_of_xy(info, window, x, y)
            self.assertLess(px, info["mx"] + info["mw"] // 2)
            self.assertGreater(py, info["my"] + info["mh"] // 2)
            self.assertEqual(self.colour(img, info, window, x, y), qd.NO_DATA)

    def colour(self, img, info, window, x, y):
        """Most common colour of the 3 x 3 pixels at grid coordinates (x, y)."""
        px, py = qp.pixel_of_xy(info, window, x, y)
        patch = [tuple(int(c) for c in img[py + dy, px + dx]) for dy in (-1, 0, 1) for dx in (-1, 0, 1)]
        return max(set(patch), key=patch.count)

    def test_curvilinear_same_picture(self):
        """The nodes of the projected grid as 2-D latitude/longitude only: the
        row index runs with y (rows are not flipped), so the high side is on
        top again; land is grey."""
        info, window, img = self.quicklook(self.curv, self.path("curv.png"))
        self.assertEqual(window["name"], "curvilinear")
        self.assertEqual((window["c0"], window["c1"], window["r0"], window["r1"]),
                         (-0.5, 40.5, -0.5, 40.5))                 # column and row indices
        for j, i in ((35, 20), (34, 5), (38, 36)):
            px, py = qp.pixel_of_xy(info, window, i, j)
            self.assertLess(py, info["my"] + info["mh"] // 2)
            c = self.colour(img, info, window, i, j)
            self.assertGreater(c[0], c[2] + 60, (j, i, c))
        for j, i in ((1, 5), (6, 2)):            # off the diagonal, a meridian
            self.assertTrue(self.land[j, i])
            self.assertEqual(self.colour(img, info, window, i, j), qd.NO_DATA)

    def test_jet_arrows_point_along_the_parallels(self):
        """u < 0, v = 0 (westward): on the page each arrow must point where
        pyproj moves a point when its longitude decreases."""
        info, window, img = self.quicklook(self.jet_uv, self.path("jet.png"), "--field", "u",
                                           "--range=-100,100", "--arrows", width=800)
        self.assertIn("arrows", info["line"])
        crs = pd.crs_of(pd.POLAR_NORTH)
        fwd = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
        inv = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
        groups = qp.dark_components(img, info)
        self.assertGreater(len(groups), 40)
        good = bad = 0
        for pts in groups:
            if len(pts) > 200:            # not a single arrow
                continue
            centre, head = qp.head_direction(pts)
            if abs(centre[0] - (info["mx"] + info["mw"] / 2)) < 30:
                continue                  # labels of inner parallels sit on the middle column
            x, y = qp.xy_of_pixel(info, window, centre[0], centre[1])
            lon, lat = inv.transform(x, y)
            if lat > 89.0:
                continue
            x2, y2 = fwd.transform(lon - 0.01, lat)       # a step west
            west = np.array([x2 - x, -(y2 - y)])           # page: y down
            west /= np.hypot(*west)
            if float(head @ west) > 0.9:
                good += 1
            else:
                bad += 1
        self.assertGreater(good, 30)
        self.assertLessEqual(bad, max(2, good // 25), f"{bad} arrows of {good + bad} point wrong")

    def test_region_on_the_grid(self):
        info, window, img = self.quicklook(self.pattern, self.path("north.png"),
                                           "--region", "0,360,80,90")
        # The rectangle of cells whose nodes lie north of 80 N (pyproj positions).
        inside = self.lat >= 80.0
        cols = np.nonzero(inside.any(axis=0))[0]
        rows = np.nonzero(inside.any(axis=1))[0]
        self.assertAlmostEqual(window["c0"], self.x[cols.min()] - 37500.0, delta=1.0)
        self.assertAlmostEqual(window["c1"], self.x[cols.max()] + 37500.0, delta=1.0)
        self.assertAlmostEqual(window["r0"], self.y[rows.min()] - 37500.0, delta=1.0)
        self.assertAlmostEqual(window["r1"], self.y[rows.max()] + 37500.0, delta=1.0)
        proc = eu.run(["quicklook", self.pattern, "-o", self.path("none.png"), "--region",
                       "0,10,0,10"])
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        self.assert_one_error_line(proc, "does not overlap the grid")
        self.assertFalse(os.path.exists(self.path("none.png")))


if __name__ == "__main__":
    unittest.main()
