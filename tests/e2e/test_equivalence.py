#!/usr/bin/python3
"""End-to-end: the same physical field in two encodings gives the same currents.

File P: packed int16 in cm (scale_factor 0.1 cm, add_offset 20 cm, _FillValue
-32767), latitude descending, longitudes -180..179.
File F: float32 in metres, latitude ascending, longitudes 0..359.
Both on a global periodic 1-degree grid (cell-centre latitudes, no pole row)
with two land patches (one straddling 0/360 in F, i.e. mid-array in P).
Both runs use --equator mask, so the comparison is between f-plane values.
P's output is reordered (latitude reversed, columns rolled) before comparing;
flags and fill must be identical, u and v equal within the tolerance below.

Tolerances, derived from the encodings (CF 1.12 section 8.1 unpacking:
value = scale_factor * stored + add_offset):
- exact case (F holds P's unpacked values): only float32 rounding of F,
  |e| <= 2^-24 |eta| per value;
- quantised case (F holds the true field, P rounds it to the nearest count):
  |e| <= q/2 per value, q = scale_factor = 0.1 cm = 1e-3 m.
A value error e becomes a derivative error of at most e/h for a centred
3-point difference ((e + e)/(2h)) and 4e/h for the one-sided 3-point
difference ((3 + 4 + 1) e/(2h)) used next to land, so
  |du| <= g/(|f| M) * D_lat,  |dv| <= g/(|f| N cos lat) * D_lon,  h in radians,
plus float32 rounding of the outputs (2^-23 |u|) and 1e-7 m s-1.
"""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402

STEP = 1.0
G_MAX = 9.84   # m s-2, above both g0 and the WGS84 normal gravity at the poles (9.8322)
R_MIN = 6.335e6  # m, below the smallest WGS84 radius of curvature (M(0) = 6335439 m)


class Equivalence(eu.SeatiltTestCase):

    def run_pair(self, exact, fmt="netcdf4"):
        p_in, f_in = self.path("in", "packed.nc"), self.path("in", "float.nc")
        fld, sf = make_ssh.write_pair(p_in, f_in, step=STEP, scale_factor_cm=0.1,
                                      add_offset_cm=20.0, exact=exact, fmt=fmt)
        p_out, f_out = self.path("out", "packed_currents.nc"), self.path("out", "float_currents.nc")
        self.currents(p_in, p_out, "--equator", "mask")
        self.currents(f_in, f_out, "--equator", "mask")
        dp = eu.read_vars(p_out, ["lat", "lon", "u", "v", "quality"])
        df = eu.read_vars(f_out, ["lat", "lon", "u", "v", "quality"])

        # coordinates kept as in each input
        np.testing.assert_array_equal(dp["lat"], fld.lat[::-1])
        np.testing.assert_array_equal(df["lat"], fld.lat)
        self.assertEqual(dp["lon"][0], -180.0)
        self.assertEqual(df["lon"][0], 0.0)

        # reorder P's output onto F's grid
        order = np.argsort(np.mod(dp["lon"], 360.0), kind="stable")
        np.testing.assert_allclose(np.mod(dp["lon"][order], 360.0), df["lon"], atol=1e-9)

        def reorder(a):
            return a[0][::-1, :][:, order]

        up, vp, qp = reorder(dp["u"]), reorder(dp["v"]), reorder(dp["quality"])
        uf, vf, qf = df["u"][0], df["v"][0], df["quality"][0]
        np.testing.assert_array_equal(qp, qf, "quality flags differ between the encodings")
        np.testing.assert_array_equal(np.isnan(up), np.isnan(uf), "fill pattern of u differs")
        np.testing.assert_array_equal(np.isnan(vp), np.isnan(vf), "fill pattern of v differs")
        self.assertTrue(np.any(qf & eu.BIT["one_sided"]), "land patches should give one-sided cells")

        # tolerance per cell (module docstring)
        la = np.repeat(fld.lat[:, np.newaxis], fld.lon.size, axis=1)
        h = np.radians(STEP)
        if exact:
            e = 2.0 ** -24 * np.nanmax(np.abs(fld.eta))
        else:
            e = 0.5 * float(sf) * 0.01          # m, half a count
        one_sided = (qf & eu.BIT["one_sided"]) != 0
        deriv = np.where(one_sided, 4.0 * e / h, e / h)
        f = np.abs(make_ssh.coriolis(la))
        tol_u = G_MAX / (f * R_MIN) * deriv + 2.0 ** -23 * np.abs(uf) + 1e-7
        tol_v = G_MAX / (f * R_MIN * np.cos(np.radians(la))) * deriv + 2.0 ** -23 * np.abs(vf) + 1e-7

        ok = np.isfinite(uf)
        self.assertGreater(ok.mean(), 0.7)
        du = np.abs(up - uf)[ok]
        dv = np.abs(vp - vf)[ok]
        self.assertTrue(np.all(du <= tol_u[ok]),
                        f"u differs beyond the packing tolerance: worst excess "
                        f"{np.max(du - tol_u[ok]):.3e} m/s (max diff {du.max():.3e})")
        self.assertTrue(np.all(dv <= tol_v[ok]),
                        f"v differs beyond the packing tolerance: worst excess "
                        f"{np.max(dv - tol_v[ok]):.3e} m/s (max diff {dv.max():.3e})")
        # a wrong unit conversion (cm taken as m) or scale would be far outside
        self.assertGreater(np.nanmax(np.abs(uf)), 100 * np.median(tol_u[ok]))
        return du, dv

    def test_quantised_field(self):
        self.run_pair(exact=False)

    def test_unpacked_values_exact(self):
        self.run_pair(exact=True)

    def test_unpacked_values_exact_classic(self):
        self.run_pair(exact=True, fmt="classic")


if __name__ == "__main__":
    unittest.main(verbosity=2)
