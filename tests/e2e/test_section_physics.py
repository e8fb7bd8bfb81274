#!/usr/bin/python3
"""End-to-end: `seatilt section` physics against closed forms and check values.

- rule of thumb (common practice, no source): 1 m drop over 500 km at 55 N ->
  roughly 0.16 m/s and, over 4000 m, roughly 3e8 m3/s;
- constant f: T = (g/f) * (eta_end - eta_start) (the integral of (g/f) d(eta));
- sign: positive to the left walking from the first point to the last, checked
  against `seatilt currents` (v = (g/f) d(eta)/dx northward);
- land and the equatorial band: excluded share reported, the rest computed;
- section length against GeographicLib (REFERENCES.md section 7).
"""

import math
import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import section_data as sd  # noqa: E402
from e2e_util import make_ssh  # noqa: E402


class SectionPhysics(eu.SeatiltTestCase):

    def section(self, inputs, line, *options, out="out.csv", expect=0):
        if isinstance(inputs, str):
            inputs = [inputs]
        outp = self.path(out)
        proc = eu.run(["section", *inputs, "--line", line, "-o", outp, *options])
        self.assertEqual(proc.returncode, expect, eu.describe(proc))
        return outp, proc

    def one_row(self, *args, **kw):
        outp, _ = self.section(*args, **kw)
        _, rows = sd.read_csv(outp)
        self.assertEqual(len(rows), 1)
        return rows[0]

    def test_rule_of_thumb_55N(self):
        # Common practice, no source: a 1 m sea-level drop across 500 km at about
        # 55 deg latitude gives roughly 0.16 m/s and, over 4000 m depth, roughly
        # 3e8 m3/s. "Roughly" = rounds to the stated figure: 0.155..0.165 m/s,
        # 2.5e8..3.5e8 m3/s. Exact (computed, g0 = 9.80665, f(55) = 1.194670e-4 s-1):
        # g/f = 82086.67 m2 s-1 per m of drop, 0.164173 m/s over 500 km, 3.28347e8 m3/s.
        span = sd.deg_for_km_at(55.0, 500.0)          # 500 km along 55 N on R1
        eta = sd.zonal_slope_eta(-25.0, -1.0 / span)  # falls 1 m over the span eastward
        inp = sd.write(self.path("thumb.nc"), sd.field(make_ssh.axis(50, 60, 0.1),
                                                       make_ssh.axis(-30, -10, 0.1), eta))
        row = self.one_row(inp, f"-25 55, {-25 + span:.10f} 55", "--depth", "4000")
        v = -sd.value(row, "mean_normal_velocity_ms")   # to the right (south): negative
        q = -sd.value(row, "transport_m3s")
        self.assertTrue(0.155 <= v <= 0.165, row)
        self.assertTrue(2.5e8 <= q <= 3.5e8, row)
        gf = sd.G0 / sd.coriolis(55.0)
        self.assertAlmostEqual(-sd.value(row, "transport_per_depth_m2s") / gf, 1.0, delta=1e-3)
        self.assertAlmostEqual(sd.value(row, "transport_sv"), sd.value(row, "transport_m3s") / 1e6,
                               delta=1e-6 * q / 1e6)
        self.assertAlmostEqual(sd.value(row, "length_m") / 500e3, 1.0, delta=0.005)
        self.assertEqual(sd.value(row, "excluded_fraction"), 0.0)

    def test_constant_f_reduces_to_g_over_f_delta_eta(self):
        # T = int (g/f) d(eta) = (g/f)(eta_end - eta_start) for constant f. A 2-degree
        # zonal section at 45 N: the geodesic bows poleward by < 0.01 deg, so f is
        # constant to 2e-4; eta is linear in longitude (bilinear exact).
        eta = sd.zonal_slope_eta(-20.0, 0.05)
        inp = sd.write(self.path("cf.nc"), sd.field(make_ssh.axis(43, 47, 0.1),
                                                    make_ssh.axis(-23, -17, 0.1), eta))
        row = self.one_row(inp, "-21 45, -19 45")
        expect = sd.G0 / sd.coriolis(45.0) * (0.05 * 2.0)
        self.assertAlmostEqual(sd.value(row, "transport_per_depth_m2s") / expect, 1.0, delta=1e-3)
        # --gravity 10 scales it by 10/g0; --earth sphere changes only the length.
        row10 = self.one_row(inp, "-21 45, -19 45", "--gravity", "10", out="g10.csv")
        self.assertAlmostEqual(sd.value(row10, "transport_per_depth_m2s") /
                               sd.value(row, "transport_per_depth_m2s"), 10.0 / sd.G0, delta=1e-9)
        rows = self.one_row(inp, "-21 45, -19 45", "--earth", "sphere", out="sph.csv")
        self.assertAlmostEqual(sd.value(rows, "transport_per_depth_m2s") / expect, 1.0, delta=1e-3)
        self.assertNotEqual(sd.value(rows, "length_m"), sd.value(row, "length_m"))

    def test_sign_left_of_walking_direction_matches_currents(self):
        # Height rising to the east at 40 N: `currents` gives v > 0 (northward);
        # walking east, north is to the left: positive transport. Walking west: negative.
        eta = sd.zonal_slope_eta(-20.0, 0.02)
        inp = sd.write(self.path("sign.nc"), sd.field(make_ssh.axis(38, 42, 0.1),
                                                      make_ssh.axis(-23, -17, 0.1), eta))
        east = self.one_row(inp, "-21 40, -19 40", out="east.csv")
        west = self.one_row(inp, "-19 40, -21 40", out="west.csv")
        self.assertGreater(sd.value(east, "transport_per_depth_m2s"), 0)
        self.assertAlmostEqual(sd.value(west, "transport_per_depth_m2s"),
                               -sd.value(east, "transport_per_depth_m2s"), delta=1e-6)
        cur = self.path("uv.nc")
        self.currents(inp, cur)
        v = eu.read_vars(cur, ["v"])["v"][0]
        v_mid = v[20, 30]                                  # 40 N, -20 E
        self.assertGreater(v_mid, 0)
        self.assertAlmostEqual(sd.value(east, "mean_normal_velocity_ms") / v_mid, 1.0, delta=0.01)

    def test_section_crossing_land(self):
        # An invented island between -12 and -10 E on a 16-degree section at 35 N.
        eta = sd.zonal_slope_eta(-10.0, 0.01)
        land = lambda la, lo: (lo > -12.05) & (lo < -9.95)  # noqa: E731
        lat, lon = make_ssh.axis(33, 37, 0.1), make_ssh.axis(-20, 0, 0.1)
        wet = sd.write(self.path("wet.nc"), sd.field(lat, lon, eta))
        isl = sd.write(self.path("island.nc"), sd.field(lat, lon, eta, land=land))
        a = self.one_row(wet, "-18 35, -2 35", out="wet.csv")
        b = self.one_row(isl, "-18 35, -2 35", out="isl.csv")
        frac = sd.value(b, "excluded_fraction")
        self.assertEqual(sd.value(a, "excluded_fraction"), 0.0)
        # 2 of 16 degrees, widened by at most one grid step and one segment per side
        self.assertGreater(frac, 2 / 16 - 0.01)
        self.assertLess(frac, 2 / 16 + 0.03)
        self.assertTrue(math.isfinite(sd.value(b, "transport_per_depth_m2s")))
        self.assertAlmostEqual(sd.value(b, "mean_normal_velocity_ms") /
                               sd.value(a, "mean_normal_velocity_ms"), 1.0, delta=0.01)

    def test_equatorial_band_excluded(self):
        eta = lambda la, lo, k: 0.01 * la  # noqa: E731
        inp = sd.write(self.path("eq.nc"), sd.field(make_ssh.axis(-12, 12, 0.25),
                                                    make_ssh.axis(-2, 2, 0.25), eta))
        row = self.one_row(inp, "0 -10, 0 10", "--spacing", "5")
        self.assertAlmostEqual(sd.value(row, "excluded_fraction"), 0.5, delta=0.01)
        self.assertTrue(math.isfinite(sd.value(row, "transport_per_depth_m2s")))
        wide = self.one_row(inp, "0 -10, 0 10", "--equator-band", "20", out="wide.csv")
        self.assertEqual(sd.value(wide, "excluded_fraction"), 1.0)
        self.assertEqual(wide["transport_per_depth_m2s"], "NaN")

    def test_length_against_geographiclib(self):
        # GeographicLib 2.1.2 (REFERENCES.md section 7): 1 deg along the equator on
        # WGS84 is 111319.490793 m; meridian 0 -> 1 deg is 110574.388558 m.
        eta = lambda la, lo, k: 0.0 * la  # noqa: E731
        inp = sd.write(self.path("flat.nc"), sd.field(make_ssh.axis(-2, 2, 0.25),
                                                      make_ssh.axis(-2, 2, 0.25), eta))
        row = self.one_row(inp, "0 0, 1 0", out="eq.csv")
        self.assertAlmostEqual(sd.value(row, "length_m"), 111319.490793, delta=1e-3)
        row = self.one_row(inp, "0 0, 0 1", out="mer.csv")
        self.assertAlmostEqual(sd.value(row, "length_m"), 110574.388558, delta=1e-3)


if __name__ == "__main__":
    unittest.main()
