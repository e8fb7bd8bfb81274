#!/usr/bin/python3
"""End-to-end: a global periodic grid wraps with no seam (brief cli_contract.md).

Field: eta = A cos(lat) sin(k lon + p), A = 0.2 m, k = 2, p = 0.7 rad, on a
1-degree global grid with pole rows (scripts/make_ssh.py wave_field). On the
sphere (--earth sphere, g0) its geostrophic velocity is, in closed form,
    u = -(g/(f R)) d(eta)/d(lat) = g A sin(k lon + p)/(2 Omega R)
    v =  (g/(f R cos lat)) d(eta)/d(lon) = g A k cos(k lon + p)/(f R)
    zeta = (1/(R cos lat)) dv/dlon - (1/R) du/dlat + u tan(lat)/R   (REFERENCES.md section 6)
         = g A sin(k lon + p)/(2 Omega R^2) * (tan lat - k^2/(sin lat cos lat)).
A 3-point centred difference of sin(k x) returns sin(k h)/(k h) times the
exact derivative (REFERENCES.md section 3), relative error <= (k h)^2/6:
2.0e-4 for v (k = 2, h = 1 degree) and 5.1e-5 for u.

Checks, on rows 10 <= |lat| <= 80 (away from the equatorial band and poles):
- flags: every cell 0, in particular the first and last column (a seam
  treated as a domain edge would carry bit 1, one-sided difference);
- u, v within the stencil error above everywhere, and the error in the
  first/last column no larger than 1.5 x the largest interior error of the
  same row (+1e-7 m s-1); same comparison for the vorticity;
- pole rows (|lat| = 90) are fill with flag bit 32;
- the same field with longitudes -180..179 gives the same (rolled) result;
- control: a strip of 300 columns (not periodic) has bit 1 in its edge columns.
"""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402

AMP, K, PHASE, STEP = 0.2, 2, 0.7, 1.0
R, OMEGA, G = make_ssh.R1, make_ssh.OMEGA, make_ssh.G0


def analytic(lat, lon):
    la, lo = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    s, c = np.sin(K * lo + PHASE), np.cos(K * lo + PHASE)
    f = 2.0 * OMEGA * np.sin(la)
    u = G * AMP * s / (2.0 * OMEGA * R) + 0.0 * la
    v = G * AMP * K * c / (f * R)
    zeta = G * AMP * s / (2.0 * OMEGA * R * R) * (np.tan(la) - K * K / (np.sin(la) * np.cos(la)))
    return u, v, zeta


class GlobalSeam(eu.SeatiltTestCase):

    def run_wave(self, lon_start=0.0, lon_count=None, name="wave.nc"):
        fld = make_ssh.wave_field(AMP, K, STEP, lon_start=lon_start, phase=PHASE,
                                  lon_count=lon_count)
        inp = make_ssh.write_ssh(self.path("in", name), fld)
        out = self.path("out", name.replace(".nc", "_currents.nc"))
        self.currents(inp, out, "--earth", "sphere")
        d = eu.read_vars(out, ["u", "v", "vorticity", "quality"])
        return fld, {k: a[0] for k, a in d.items()}

    def check_no_seam(self, fld, d):
        lat, lon = fld.lat, fld.lon
        u0, v0, z0 = analytic(lat, lon)
        rows = (np.abs(lat) >= 10.0) & (np.abs(lat) <= 80.0)
        q = d["quality"][rows]
        self.assertTrue(np.all(q[:, 0] == 0) and np.all(q[:, -1] == 0),
                        f"seam columns flagged: {np.unique(q[:, [0, -1]])} (bit 1 = one-sided)")
        self.assertTrue(np.all(q == 0), f"flags on a smooth global field: {np.unique(q)}")

        h = np.radians(STEP)
        tol_u = ((h ** 2) / 6.0 + 2.0 ** -22) * np.abs(u0[rows]).max() + 1e-7
        tol_v = ((K * h) ** 2 / 6.0 + 2.0 ** -22) * np.abs(v0[rows]) + 1e-7
        err_u = np.abs(d["u"][rows] - u0[rows])
        err_v = np.abs(d["v"][rows] - v0[rows])
        self.assertTrue(np.all(err_u <= tol_u), f"u error {err_u.max():.3e} > {tol_u:.3e} m/s")
        self.assertTrue(np.all(err_v <= tol_v),
                        f"v error beyond the stencil bound: worst excess {np.max(err_v - tol_v):.3e}")

        for name, ref in (("u", u0), ("v", v0), ("vorticity", z0)):
            err = np.abs(d[name][rows] - ref[rows])
            interior = err[:, 1:-1].max(axis=1)
            floor = 1e-7 if name != "vorticity" else 1e-13
            for col in (0, -1):
                bad = err[:, col] > 1.5 * interior + floor
                self.assertFalse(np.any(bad),
                                 f"{name}: seam column {col} error {err[bad, col][:3]} exceeds "
                                 f"1.5 x the interior error {interior[bad][:3]}")

        poles = np.abs(lat) == 90.0
        self.assertEqual(int(poles.sum()), 2)
        for name in ("u", "v"):
            self.assertTrue(np.all(np.isnan(d[name][poles])), f"{name} not fill at the poles")
        self.assertTrue(np.all(d["quality"][poles] & eu.BIT["pole"]), "pole rows without bit 32")

    def test_seam_at_zero(self):
        fld, d = self.run_wave(0.0)
        self.check_no_seam(fld, d)

    def test_seam_at_dateline(self):
        fld, d = self.run_wave(-180.0, name="wave180.nc")
        self.check_no_seam(fld, d)
        # same physics as on 0..360: roll and compare with the 0..360 run
        fld0, d0 = self.run_wave(0.0)
        order = np.argsort(np.mod(fld.lon, 360.0), kind="stable")
        for name in ("u", "v", "vorticity"):
            a, b = d[name][:, order], d0[name]
            scale = np.nanmax(np.abs(b[np.abs(fld.lat) <= 80.0]))
            np.testing.assert_allclose(a, b, rtol=0, atol=1e-5 * scale, err_msg=name)
        np.testing.assert_array_equal(d["quality"][:, order], d0["quality"])

    def test_regional_strip_is_not_periodic(self):
        fld, d = self.run_wave(0.0, lon_count=300, name="strip.nc")
        rows = (np.abs(fld.lat) >= 10.0) & (np.abs(fld.lat) <= 80.0)
        q = d["quality"][rows]
        self.assertTrue(np.all(q[:, 0] & eu.BIT["one_sided"]))
        self.assertTrue(np.all(q[:, -1] & eu.BIT["one_sided"]))


if __name__ == "__main__":
    unittest.main(verbosity=2)
