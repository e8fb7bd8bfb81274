#!/usr/bin/python3
"""End-to-end: `seatilt quicklook` maps of height and currents files.

Inputs come from the project's generator (scripts/make_ssh.py): a small
Tessaline Sea (invented regional basin, absolute height, invented coast and
islands as fill), its `currents` output, and an invented signed anomaly field
(positive north, negative south, zero on the equator; descending latitude,
longitudes -180..180, a land block). Every PNG is decoded by the independent
decoder in quicklook_data.py (PNG specification + zlib). Expected colours:
no-data grey (153, 153, 153) and the ColorBrewer RdBu centre #F7F7F7.
"""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402
import quicklook_data as qd  # noqa: E402

WIDTH = 520   # small PNGs keep the pure-Python decoder fast


class QuicklookMaps(eu.SeatiltTestCase):

    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        import tempfile
        cls._shared = tempfile.TemporaryDirectory(prefix="seatilt-e2e-ql-")
        d = cls._shared.name
        cls.basin_fld = make_ssh.demo_basin(step=0.25, days=2)
        cls.basin = make_ssh.write_ssh(os.path.join(d, "tessaline.nc"), cls.basin_fld)
        cls.uv = os.path.join(d, "tessaline_uv.nc")
        proc = eu.run(["currents", cls.basin, "-o", cls.uv])
        assert proc.returncode == 0, eu.describe(proc)
        cls.signed_fld = qd.signed_field(make_ssh)
        cls.signed = make_ssh.write_ssh(os.path.join(d, "signed.nc"), cls.signed_fld)

    @classmethod
    def tearDownClass(cls):
        cls._shared.cleanup()

    def quicklook(self, inp, out, *options, env=None):
        proc = eu.run(["quicklook", inp, "-o", out, "--verbose", "--width", WIDTH, *options], env=env)
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        info = qd.parse_info(proc.stderr)
        img = qd.read_png(out)
        self.assertEqual(img.shape[1], WIDTH)             # requested width
        self.assertEqual((img.shape[1], img.shape[0]), (info["w"], info["h"]))
        self.assertEqual(eu.temp_leftovers(os.path.dirname(out)), [])
        return info, img

    def test_height_map_land_is_grey(self):
        info, img = self.quicklook(self.basin, self.path("ssh.png"))
        self.assertEqual(info["var"], "sea_height")
        self.assertEqual(info["units"], "m")               # the Reader converts to metres
        self.assertEqual(info["scale"], "sequential")      # absolute height: a magnitude
        self.assertIn("2nd-98th percentile", info["how"])
        eta = self.basin_fld.eta[0]
        lat, lon = self.basin_fld.lat, self.basin_fld.lon
        land = np.isnan(eta)
        # interior land and sea cells (all 8 neighbours alike), a spread sample
        inner = land[1:-1, 1:-1] & land[:-2, 1:-1] & land[2:, 1:-1] & land[1:-1, :-2] & land[1:-1, 2:]
        sea = ~land
        inner_sea = sea[1:-1, 1:-1] & sea[:-2, 1:-1] & sea[2:, 1:-1] & sea[1:-1, :-2] & sea[1:-1, 2:]
        lj, li = np.nonzero(inner)
        sj, si = np.nonzero(inner_sea)
        self.assertGreater(lj.size, 10)
        for k in np.linspace(0, lj.size - 1, 15).astype(int):
            c = qd.colour_near(img, info, lon[li[k] + 1], lat[lj[k] + 1])
            self.assertEqual(c, qd.NO_DATA, f"land cell {lat[lj[k] + 1]}, {lon[li[k] + 1]}")
        for k in np.linspace(0, sj.size - 1, 15).astype(int):
            c = qd.colour_near(img, info, lon[si[k] + 1], lat[sj[k] + 1])
            self.assertNotEqual(c, qd.NO_DATA, f"sea cell {lat[sj[k] + 1]}, {lon[si[k] + 1]}")
        # the region defaults to the cell edges of the grid
        self.assertAlmostEqual(info["lat0"], lat.min() - 0.125, places=4)
        self.assertAlmostEqual(info["lat1"], lat.max() + 0.125, places=4)

    def test_signed_field_pattern_zero_and_colour_bar(self):
        info, img = self.quicklook(self.signed, self.path("signed.png"))
        self.assertEqual(info["scale"], "diverging")       # a sea level anomaly
        self.assertAlmostEqual(info["lo"], -info["hi"], delta=1e-9 * info["hi"])
        for lon in (-150.3, -60.7, 10.3, 100.9, 170.1):
            n = qd.colour_near(img, info, lon, 40.3)
            s = qd.colour_near(img, info, lon, -40.3)
            self.assertGreater(n[0], n[2] + 40, f"north of {lon} should be red: {n}")
            self.assertGreater(s[2], s[0] + 40, f"south of {lon} should be blue: {s}")
            self.assertEqual(qd.colour_near(img, info, lon, 0.0), qd.DIVERGING_CENTRE)
        self.assertEqual(qd.colour_near(img, info, 50.3, 25.3), qd.NO_DATA)   # land block
        # colour bar below the map: blue end, centre colour in the middle, red end
        bx, by, bw, bh = info["bx"], info["by"], info["bw"], info["bh"]
        self.assertGreater(by, info["my"] + info["mh"])
        self.assertLessEqual(by + bh, info["h"])
        self.assertGreater(bw, 0.3 * info["mw"])
        row = img[by + bh // 2, bx:bx + bw].astype(int)
        self.assertGreater(row[0, 2], row[0, 0] + 40)
        self.assertGreater(row[-1, 0], row[-1, 2] + 40)
        mid = row[bw // 2]
        self.assertTrue(all(abs(int(m) - 247) <= 3 for m in mid), mid)
        self.assertTrue((img[by + 1:by + bh - 1, bx:bx + bw] != 255).any(axis=2).all())  # no white gap

    def test_currents_speed_arrows_and_vorticity(self):
        info, img = self.quicklook(self.uv, self.path("speed.png"), "--arrows")
        self.assertEqual(info["var"], "speed")              # default field of a currents file
        self.assertEqual(info["units"], "m s-1")
        self.assertEqual(info["scale"], "sequential")
        self.assertRegex(info["line"], r", \d+ arrows \(reference [0-9.e+-]+ m s-1\)")
        self.assertGreaterEqual(info["lo"], 0.0)
        info, img = self.quicklook(self.uv, self.path("vort.png"), "--field", "vorticity", "--time", "1")
        self.assertEqual(info["scale"], "diverging")
        self.assertEqual(info["units"], "s-1")
        self.assertAlmostEqual(info["lo"], -info["hi"], delta=1e-6 * info["hi"])
        self.assertIn("2031-", info["line"])                # date of step 1 decoded

    def test_region_across_the_seam_and_given_range(self):
        info, img = self.quicklook(self.signed, self.path("seam.png"),
                                   "--region", "160,-160,-50,50", "--range=-0.1,0.1")
        self.assertEqual((info["lon0"], info["lon1"]), (160.0, 200.0))
        self.assertEqual((info["lo"], info["hi"]), (-0.1, 0.1))
        self.assertIn("--range", info["how"])
        box = img[info["my"]:info["my"] + info["mh"], info["mx"]:info["mx"] + info["mw"]]
        grey = np.all(box == np.array(qd.NO_DATA, dtype=np.uint8), axis=2)
        self.assertFalse(grey.any(), "no gap at 180 degrees")
        for lon in (165.3, 179.3, 180.7, -170.3):
            self.assertGreater(qd.colour_near(img, info, lon, 30.3)[0], qd.colour_near(img, info, lon, 30.3)[2])

    def test_without_fonts_text_does_not_crash(self):
        conf = self.path("fonts", "fonts.conf")
        with open(conf, "w") as f:
            f.write('<?xml version="1.0"?>\n<!DOCTYPE fontconfig SYSTEM "fonts.dtd">\n'
                    f"<fontconfig><cachedir>{self.folder('fonts', 'cache')}</cachedir></fontconfig>\n")
        info, img = self.quicklook(self.signed, self.path("nofont.png"),
                                   env={"FONTCONFIG_FILE": conf, "FONTCONFIG_PATH": self.folder("fonts")})
        self.assertEqual(qd.colour_near(img, info, 10.3, 0.0), qd.DIVERGING_CENTRE)
        # some dark text pixels above the map (the title)
        self.assertTrue((img[:info["my"] - 2].sum(axis=2) < 200).any())


if __name__ == "__main__":
    unittest.main()
