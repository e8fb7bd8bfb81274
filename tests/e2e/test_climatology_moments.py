#!/usr/bin/python3
"""seatilt climatology: known moments on synthetic days, currents inputs, --min-valid.

Check values are closed forms of the synthetic slopes (climatology_data.py:
u_t = a_t U(lat), v_t = b_t V(lat), geostrophic balance on the sphere) with
population moments from numpy, and principal axes from numpy.linalg.eigh.
Outputs are float32: tolerances are float32 rounding (rtol 2e-6), not physics.
"""

from __future__ import annotations

import math
import os
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import climatology_data as cd  # noqa: E402

RTOL = 2e-6   # float32 output (2^-23 = 1.2e-7 per value, a few operations)
SPHERE = ["--earth", "sphere"]


def amplitudes(n, seed):
    rng = np.random.default_rng(seed)
    a = rng.normal(0.6, 0.3, n)
    b = -0.2 + 0.5 * (a - 0.6) + rng.normal(0.0, 0.2, n)   # correlated with a
    return a, b


class KnownMoments(eu.SeatiltTestCase):

    def make_files(self, n_files=3, days=12, calendar="standard", missing_cell=None):
        """Files of consecutive days; returns (paths, a, b, valid) with valid (nt, ny, nx)."""
        a, b = amplitudes(n_files * days, 11)
        lat, lon = cd.grid()
        valid = np.ones((a.size, lat.size, lon.size), dtype=bool)
        if missing_cell is not None:
            j, i = missing_cell
            valid[::4, j, i] = False    # a quarter of the days: land there
        dates = cd.daily_dates((2011, 1, 20), a.size, calendar)
        paths = []
        for k in range(n_files):
            s = slice(k * days, (k + 1) * days)
            paths.append(cd.write_days(self.path(f"ssh_{k}.nc"), a[s], b[s], dates[s],
                                       calendar=calendar, missing=~valid[s]))
        return paths, a, b, valid

    def climatology(self, inputs, out, *options, expect=0):
        proc = eu.run(["climatology", *inputs, "-o", out, *options])
        self.assertEqual(proc.returncode, expect, eu.describe(proc))
        return proc

    def test_moments_by_all(self):
        paths, a, b, _ = self.make_files()
        out = self.path("all.nc")
        self.climatology(paths, out, *SPHERE)
        lat, lon = cd.grid()
        U, V = cd.unit_velocity(lat)
        U, V = U[:, None], V[:, None]
        got = eu.read_vars(out)
        n = a.size
        # Population moments (divided by N): numpy var/cov with ddof=0.
        cov_ab = np.cov(a, b, ddof=0)
        expect = {
            "u_mean": a.mean() * U, "v_mean": b.mean() * V,
            "u_var": cov_ab[0, 0] * U ** 2, "v_var": cov_ab[1, 1] * V ** 2,
            "uv_cov": cov_ab[0, 1] * U * V,
        }
        expect["eke"] = 0.5 * (expect["u_var"] + expect["v_var"])
        u_t = a[:, None, None] * U[None]
        v_t = b[:, None, None] * V[None]
        expect["speed_mean"] = np.hypot(u_t, v_t + 0 * u_t).mean(axis=0)
        shape = (lat.size, lon.size)
        for name, value in expect.items():
            np.testing.assert_allclose(got[name][0], np.broadcast_to(value, shape), rtol=RTOL,
                                       err_msg=name)
        self.assertTrue((got["count"][0] == n).all())
        # Principal axes: eigen-decomposition of the 2x2 covariance (numpy.linalg.eigh).
        for j in range(lat.size):
            c = np.array([[expect["u_var"][j, 0], expect["uv_cov"][j, 0]],
                          [expect["uv_cov"][j, 0], expect["v_var"][j, 0]]])
            w, vec = np.linalg.eigh(c)
            major = vec[:, 1]
            theta = math.degrees(math.atan2(major[1], major[0]))
            theta = (theta + 90.0) % 180.0 - 90.0   # axis: fold into (-90, 90]
            if theta <= -90.0:
                theta += 180.0
            np.testing.assert_allclose(got["variance_major_axis_std"][0, j], math.sqrt(w[1]), rtol=RTOL)
            np.testing.assert_allclose(got["variance_minor_axis_std"][0, j], math.sqrt(w[0]), rtol=1e-4)
            np.testing.assert_allclose(got["variance_major_axis_direction"][0, j], theta, atol=1e-4)

        with netCDF4.Dataset(out) as ds:
            t = ds["time"]
            self.assertEqual(t.bounds, "time_bounds")
            self.assertNotIn("climatology", t.ncattrs())
            # Whole days: first map's day 00:00 to the day after the last map.
            start = netCDF4.num2date(ds["time_bounds"][0, 0], t.units, t.calendar)
            end = netCDF4.num2date(ds["time_bounds"][0, 1], t.units, t.calendar)
            self.assertEqual((start.year, start.month, start.day), (2011, 1, 20))
            self.assertEqual((end.year, end.month, end.day), (2011, 2, 25))   # 36 days later
            self.assertEqual(ds["u_mean"].cell_methods, "time: mean")
            self.assertEqual(ds["u_var"].cell_methods, "time: variance")
            self.assertEqual(ds["u_mean"].standard_name,
                             "surface_geostrophic_eastward_sea_water_velocity_"
                             "assuming_mean_sea_level_for_geoid")
            self.assertNotIn("standard_name", ds["eke"].ncattrs())
            self.assertEqual(ds["eke"].units, "m2 s-2")
            self.assertEqual(ds["count"].standard_name, "number_of_observations")
            self.assertEqual(int(ds["period_steps"][0]), n)
            self.assertIn("counter-clockwise from east", ds["variance_major_axis_direction"].comment)
            self.assertEqual(ds.seatilt_status, "complete")
            self.assertEqual(ds.geostrophy_earth_model, "sphere")

    def test_from_to_and_min_valid(self):
        paths, a, b, valid = self.make_files(missing_cell=(4, 4))
        lat, _ = cd.grid()
        U, _ = cd.unit_velocity(lat)
        out = self.path("sel.nc")
        # 2011-01-25 .. 2011-02-10: days 5 .. 21 of the record.
        self.climatology(paths, out, *SPHERE, "--from", "2011-01-25", "--to", "2011-02-10")
        got = eu.read_vars(out, ["u_mean", "count"])
        sel = slice(5, 22)
        self.assertTrue((got["count"][0, 0, 0] == 17))
        np.testing.assert_allclose(got["u_mean"][0, 0, 0], a[sel].mean() * U[0], rtol=RTOL)
        v = valid[sel, 4, 4]
        self.assertEqual(int(got["count"][0, 4, 4]), int(v.sum()))
        np.testing.assert_allclose(got["u_mean"][0, 4, 4], a[sel][v].mean() * U[4], rtol=RTOL)

        # The cell is valid on 27 of 36 days (0.75): masked at 0.8, kept at 0.7.
        masked, kept = self.path("m08.nc"), self.path("m07.nc")
        self.climatology(paths, masked, *SPHERE, "--min-valid", "0.8")
        self.climatology(paths, kept, *SPHERE, "--min-valid", "0.7")
        m8 = eu.read_vars(masked, ["u_mean", "eke", "count"])
        m7 = eu.read_vars(kept, ["u_mean", "count"])
        self.assertTrue(np.isnan(m8["u_mean"][0, 4, 4]) and np.isnan(m8["eke"][0, 4, 4]))
        self.assertEqual(int(m8["count"][0, 4, 4]), 27)
        self.assertFalse(np.isnan(m8["u_mean"][0, 0, 0]))
        np.testing.assert_allclose(m7["u_mean"][0, 4, 4], a[valid[:, 4, 4]].mean() * U[4], rtol=RTOL)

        # Nothing selected: exit 3, one line, no output.
        none = self.path("none.nc")
        proc = self.climatology(paths, none, "--from", "2030-01-01", expect=3)
        self.assert_one_error_line(proc, "no time step")
        self.assertFalse(os.path.exists(none))

    def test_currents_inputs_match_height_inputs(self):
        paths, _, _, _ = self.make_files(n_files=2, days=8)
        outdir = self.folder("uv")
        self.currents(paths, outdir + "/", *SPHERE, "--fields", "u,v,vorticity")
        uv = sorted(os.path.join(outdir, f) for f in os.listdir(outdir))
        self.assertEqual(len(uv), 2)
        # Also without vorticity in the files (then computed from u, v with their settings).
        novort = self.folder("uv_only")
        self.currents(paths, novort + "/", *SPHERE, "--fields", "u,v")
        uvo = sorted(os.path.join(novort, f) for f in os.listdir(novort))
        ref, from_uv, from_uvo = self.path("h.nc"), self.path("c.nc"), self.path("co.nc")
        self.climatology(paths, ref, *SPHERE, "--by", "month")
        self.climatology(uv, from_uv, "--by", "month")
        self.climatology(uvo, from_uvo, "--by", "month")
        r, c, co = eu.read_vars(ref), eu.read_vars(from_uv), eu.read_vars(from_uvo)
        for name in ["u_mean", "v_mean", "speed_mean", "u_var", "eke", "vorticity_mean"]:
            # currents files hold float32 velocities: agreement to float32 rounding.
            np.testing.assert_allclose(c[name], r[name], rtol=1e-5, atol=1e-12, err_msg=name)
        np.testing.assert_allclose(co["vorticity_mean"], r["vorticity_mean"], rtol=1e-4, atol=1e-14)
        np.testing.assert_array_equal(c["count"], r["count"])
        # The vorticity mean equals the mean of the daily vorticity maps of `currents`.
        daily = np.concatenate([eu.read_vars(p, ["vorticity"])["vorticity"] for p in uv])
        with netCDF4.Dataset(ref) as ds:
            jan = 0
            self.assertEqual(int(ds["period_steps"][jan]), 12)
        dates = cd.daily_dates((2011, 1, 20), 16, "standard")
        in_jan = np.array([d.month == 1 for d in dates])
        np.testing.assert_allclose(r["vorticity_mean"][0], daily[in_jan].mean(axis=0), rtol=1e-5)
        # Settings of the currents files must agree: mixing orders is refused.
        other = self.folder("uv4")
        self.currents(paths[:1], other + "/", *SPHERE, "--order", "4")
        mixed = self.path("mixed.nc")
        proc = self.climatology([uv[0], os.path.join(other, os.listdir(other)[0])], mixed, expect=3)
        self.assert_one_error_line(proc, "geostrophy settings")
        self.assertFalse(os.path.exists(mixed))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])

    def test_bad_usage_and_inputs(self):
        paths, _, _, _ = self.make_files(n_files=1, days=3)
        out = self.path("x.nc")
        for opts, mention in [(["--by", "year"], "--by"), (["--min-valid", "1.5"], "--min-valid"),
                              (["--from", "2011-02-30x"], "--from"),
                              (["--from", "2012-01-01", "--to", "2011-01-01"], "--from")]:
            proc = self.climatology(paths, out, *opts, expect=2)
            self.assert_one_error_line(proc, mention)
        bad = self.path("bad.nc")
        with open(bad, "w") as fh:
            fh.write("not netCDF")
        proc = self.climatology([paths[0], bad], out, expect=3)
        self.assert_one_error_line(proc, "bad.nc")
        self.assertFalse(os.path.exists(out))
        self.climatology(paths, out)
        proc = self.climatology(paths, out, expect=4)
        self.assert_one_error_line(proc, "exists")
        self.climatology(paths, out, "--force")


if __name__ == "__main__":
    unittest.main()
