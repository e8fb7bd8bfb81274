#!/usr/bin/python3
"""End-to-end: the three equator methods (brief cli_contract.md, REFERENCES.md section 2).

Field: an equatorial ridge eta = A exp(-y^2/L^2), y = R1 lat (lat in radians),
A = 0.1 m, L = 300 km, on |lat| <= 15 at 0.1 degree with a row at 0, 21
columns (scripts/make_ssh.py ridge_field). On the equatorial beta plane
    u(0) = -(g/beta) d2(eta)/dy2 = 2 g A/(beta L^2),  v = 0,
beta = 2 Omega/R1 = 2.28916e-11 m-1 s-1 at the equator on the sphere, so
u(0) = 0.95199 m/s (REFERENCES.md section 2 [computed]; Picaut et al. 1990).
Off the equator the beta formula gives (g A/beta)(2/L^2 - 4 y^2/L^4) exp(-y^2/L^2),
not the geostrophic profile (the two meet only at y = 0).

Stencil error of u at the equator: the second difference with spacing H has
the error (H^2/12) eta''''(xi); |eta''''| <= 12 A/L^4 (its maximum, at y = 0),
so |du| <= g A H^2/(beta L^4). The implementation may build eta_yy from a
compact 3-point second difference (H = h) or from two centred first
differences (H = 2h); we allow H = 2h: 2.6e-3 m/s (0.27 %) for h = 0.1 degree
= 11.1195 km. This still separates the spherical beta (R1) from the WGS84 one
(beta 0.56 % larger, u 0.9467 m/s).
"""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402

A, L, STEP = 0.1, 300e3, 0.1
BETA0 = 2.0 * make_ssh.OMEGA / make_ssh.R1          # 2.28916e-11 m-1 s-1 (REFERENCES.md section 2)
U0 = 0.95199                                        # m/s, REFERENCES.md section 2 [computed]
H = 2.0 * make_ssh.R1 * np.radians(STEP)            # widest plausible second-difference spacing
STENCIL_TOL = make_ssh.G0 * A * H ** 2 / (BETA0 * L ** 4)   # ~2.6e-3 m/s


class Equator(eu.SeatiltTestCase):

    def run_ridge(self, method, *extra, offset_km=0.0):
        fld = make_ssh.ridge_field(A, L / 1e3, offset_km, STEP, 15.0)
        inp = make_ssh.write_ssh(self.path("in", f"ridge_{offset_km:g}.nc"), fld)
        out = self.path("out", f"ridge_{method}_{offset_km:g}_{len(extra)}.nc")
        method_opt = [] if method is None else ["--equator", method]
        self.currents(inp, out, *method_opt, "--earth", "sphere", *extra)
        d = {k: a[0] for k, a in eu.read_vars(out, ["u", "v", "quality"]).items()}
        return fld, d

    def test_analytic_value_constant(self):
        # The constants reproduce the published check value (pure arithmetic, no binary).
        self.assertAlmostEqual(BETA0, 2.28916e-11, delta=1e-16)
        self.assertAlmostEqual(2 * make_ssh.G0 * A / (BETA0 * L ** 2), U0, delta=5e-6)
        self.assertLess(STENCIL_TOL, 3e-3)

    def test_beta(self):
        fld, d = self.run_ridge("beta")
        lat = fld.lat
        j0 = int(np.argmin(np.abs(lat)))
        self.assertEqual(lat[j0], 0.0)
        u_eq = d["u"][j0]
        self.assertTrue(np.all(np.isfinite(u_eq)), "u not finite on the equator")
        np.testing.assert_allclose(u_eq, U0, rtol=0, atol=STENCIL_TOL + 1e-5)
        # Inside the band u = -(g/beta) eta_yy = (g A/beta)(2/L^2 - 4 y^2/L^4) exp(-y^2/L^2)
        # (the beta formula; it equals the geostrophic 2 g A/(beta L^2) exp(-y^2/L^2) only at
        # y = 0). beta is taken at the node (beta0 cos lat on the sphere) or at the equator:
        # on |lat| <= 2, cos(lat) >= 0.99939, allow 7e-4 relative for that choice.
        near = np.abs(lat) <= 2.0
        ref = make_ssh.beta_ridge_u(lat[near], A, L, formula="beta")[:, np.newaxis]
        np.testing.assert_allclose(d["u"][near], np.broadcast_to(ref, d["u"][near].shape),
                                   rtol=7e-4, atol=STENCIL_TOL + 1e-5)
        band = np.abs(lat) < 4.95
        self.assertTrue(np.all(np.abs(d["v"][band]) < 1e-5), "v must vanish for a zonal ridge")
        self.assertTrue(np.all(d["quality"][band][:, 2:-2] & eu.BIT["beta"]),
                        "beta-plane cells without flag bit 2")
        outside = np.abs(lat) > 5.05
        self.assertFalse(np.any(d["quality"][outside] & eu.BIT["beta"]))

    def test_mask(self):
        fld, d = self.run_ridge("mask")
        lat = fld.lat
        inside = np.abs(lat) < 4.95
        outside = (np.abs(lat) > 5.05) & (np.abs(lat) < 14.0)
        for name in ("u", "v"):
            self.assertTrue(np.all(np.isnan(d[name][inside])), f"{name} not fill in the band")
            self.assertTrue(np.all(np.isfinite(d[name][outside])), f"{name} fill outside the band")
        self.assertTrue(np.all(d["quality"][inside] & eu.BIT["equator_mask"]), "band without bit 16")
        self.assertFalse(np.any(d["quality"][outside] & eu.BIT["equator_mask"]))
        # outside the band the f-plane formula holds: u = -(g/f) eta_y (centred, error small)
        y = make_ssh.R1 * np.radians(lat)
        u_f = -(make_ssh.G0 / make_ssh.coriolis(lat)) * A * (-2.0 * y / L ** 2) * np.exp(-(y / L) ** 2)
        cols = slice(2, -2)
        np.testing.assert_allclose(d["u"][outside][:, cols],
                                   np.broadcast_to(u_f[outside][:, None], d["u"][outside][:, cols].shape),
                                   rtol=5e-3, atol=1e-4)

    def test_mask_band_option(self):
        fld, d = self.run_ridge("mask", "--equator-band", "3")
        lat = fld.lat
        self.assertTrue(np.all(np.isnan(d["u"][np.abs(lat) < 2.95])))
        between = (np.abs(lat) > 3.05) & (np.abs(lat) < 14.0)
        self.assertTrue(np.all(np.isfinite(d["u"][between])))

    def check_smooth(self, lat, u_col, what):
        """Finite, and no spike: max |second difference| small relative to max |u|."""
        sel = np.abs(lat) <= 10.0
        col = u_col[sel]
        self.assertTrue(np.all(np.isfinite(col)), f"{what}: non-finite u near the equator")
        d2 = np.abs(np.diff(col, 2))
        # a smooth profile with scale >= 2 degrees sampled at 0.1 degree has
        # |d2| ~ (0.1/2)^2 * few * max|u| ~ 1e-2 max|u|; a 1/f spike gives O(1) and more
        self.assertLess(d2.max(), 0.03 * np.abs(col).max(),
                        f"{what}: spike near the equator (max |second difference| {d2.max():.3e}, "
                        f"max |u| {np.abs(col).max():.3e} at lat {lat[sel][np.argmax(np.abs(col))]})")

    def test_blend_centred_ridge(self):
        fld, d = self.run_ridge("blend")
        lat = fld.lat
        j0 = int(np.argmin(np.abs(lat)))
        mid = fld.lon.size // 2
        self.check_smooth(lat, d["u"][:, mid], "centred ridge")
        # W_beta(0) = 1 (Lagerloef et al. 1999), so the equator value is the beta-plane one
        np.testing.assert_allclose(d["u"][j0], U0, rtol=0, atol=STENCIL_TOL + 1e-5)
        band = np.abs(lat) < 4.95
        self.assertTrue(np.all(d["quality"][band][:, 2:-2] & eu.BIT["blend"]), "band without bit 4")
        self.assertTrue(np.all(np.isfinite(d["v"][band])))

    def test_blend_offset_ridge(self):
        # Ridge centred 200 km north of the equator: eta_y != 0 at the equator, so the
        # f-plane formula alone would blow up as 1/f there. The blend must stay finite and smooth.
        fld, d = self.run_ridge("blend", offset_km=200.0)
        self.check_smooth(fld.lat, d["u"][:, fld.lon.size // 2], "offset ridge")
        # the default method is blend with a 5-degree band (brief cli_contract.md)
        _, d2 = self.run_ridge(None, offset_km=200.0)
        np.testing.assert_array_equal(d["u"], d2["u"])
        np.testing.assert_array_equal(d["quality"], d2["quality"])


if __name__ == "__main__":
    unittest.main(verbosity=2)
