#!/usr/bin/python3
"""seatilt climatology --partial and seatilt merge: three partial states merged
equal one pass over all inputs to 1e-12 relative (the pairwise update of Chan,
Golub & LeVeque 1983 is exact in real arithmetic; the bound is double rounding),
and incompatible partials are refused.
"""

from __future__ import annotations

import os
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import climatology_data as cd  # noqa: E402

STATE_ARRAYS = ["count", "mean_u", "mean_v", "mean_speed", "m2_u", "m2_v", "comoment_uv",
                "count_vorticity", "mean_vorticity"]
OUTPUTS = ["u_mean", "v_mean", "speed_mean", "u_var", "v_var", "uv_cov", "eke",
           "variance_major_axis_std", "variance_minor_axis_std", "variance_major_axis_direction",
           "vorticity_mean", "count", "period_steps"]


def read_state(path):
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_mask(False)
        state = {name: np.asarray(ds[name][:]) for name in STATE_ARRAYS + ["period_steps"]}
        state["inputs"] = int(ds.climatology_input_files)
    return state


def assert_states_close(test, a, b, rtol=1e-12):
    for name in STATE_ARRAYS + ["period_steps"]:
        x, y = a[name], b[name]
        if name.startswith("count") or name == "period_steps":
            np.testing.assert_array_equal(x, y, err_msg=name)
        else:
            # Relative to the array's scale (moments near zero have no relative precision).
            scale = max(np.abs(y).max(), 1e-300)
            test.assertLessEqual(float(np.abs(x - y).max()) / scale, rtol, name)
    test.assertEqual(a["inputs"], b["inputs"])


def make_archive(test, n_files=6, days=9, calendar="standard"):
    """N_FILES files of DAYS days each, spread over two years, shuffled grid values."""
    rng = np.random.default_rng(21)
    paths = []
    for k in range(n_files):
        start = (2014 + k % 2, 1 + (2 * k) % 12, 3)
        a = rng.normal(0.4, 0.3, days)
        b = rng.normal(-0.1, 0.2, days) + 0.3 * a
        dates = cd.daily_dates(start, days, calendar)
        lat, lon = cd.grid()
        missing = np.zeros((days, lat.size, lon.size), dtype=bool)
        missing[k % days, 2, 3] = True   # some land, differently per file
        paths.append(cd.write_days(test.path(f"day_{k}.nc"), a, b, dates, calendar=calendar,
                                   missing=missing))
    return paths


class MergePartials(eu.SeatiltTestCase):

    def clim(self, inputs, out, *opts, expect=0):
        proc = eu.run(["climatology", *inputs, "-o", out, "--earth", "sphere", *opts])
        self.assertEqual(proc.returncode, expect, eu.describe(proc))
        return proc

    def merge(self, inputs, out, *opts, expect=0):
        proc = eu.run(["merge", *inputs, "-o", out, *opts])
        self.assertEqual(proc.returncode, expect, eu.describe(proc))
        return proc

    def test_three_partials_equal_one_pass(self):
        paths = make_archive(self)
        # A job array of three tasks over an interleaved split of the archive.
        groups = [paths[0::3], paths[1::3], paths[2::3]]
        parts = []
        for k, g in enumerate(groups):
            parts.append(self.path(f"part_{k}.nc"))
            self.clim(g, parts[-1], "--by", "month", "--partial")
        one_state, merged_state = self.path("one_state.nc"), self.path("merged_state.nc")
        self.clim(paths, one_state, "--by", "month", "--partial")
        self.merge([parts[2], parts[0], parts[1]], merged_state, "--partial")
        assert_states_close(self, read_state(merged_state), read_state(one_state))

        one, merged = self.path("one.nc"), self.path("merged.nc")
        self.clim(paths, one, "--by", "month")
        self.merge(parts, merged)
        a, b = eu.read_vars(one, OUTPUTS), eu.read_vars(merged, OUTPUTS)
        for name in OUTPUTS:
            # Double results within 1e-12 may still round to neighbouring floats.
            np.testing.assert_allclose(b[name], a[name], rtol=3e-7, atol=0, equal_nan=True,
                                       err_msg=name)
        with netCDF4.Dataset(one) as d1, netCDF4.Dataset(merged) as d2:
            np.testing.assert_array_equal(d1["climatology_bounds"][:], d2["climatology_bounds"][:])
            self.assertEqual(d1["time"].units, d2["time"].units)
            self.assertEqual(int(d2.climatology_input_files), len(paths))
        # Merging a merged partial with nothing else changes nothing.
        again = self.path("again.nc")
        self.merge([merged_state], again, "--partial")
        assert_states_close(self, read_state(again), read_state(merged_state), rtol=0)

    def test_incompatible_partials_are_refused(self):
        paths = make_archive(self, n_files=2, days=4)
        by_month, by_all = self.path("m.nc"), self.path("a.nc")
        self.clim(paths[:1], by_month, "--by", "month", "--partial")
        self.clim(paths[1:], by_all, "--by", "all", "--partial")
        out = self.path("out.nc")
        proc = self.merge([by_month, by_all], out, expect=3)
        line = self.assert_one_error_line(proc, "a.nc")
        self.assertIn("--by all", line)
        self.assertFalse(os.path.exists(out))
        order4 = self.path("o4.nc")
        self.clim(paths[1:], order4, "--by", "month", "--partial", "--order", "4")
        proc = self.merge([by_month, order4], out, expect=3)
        self.assert_one_error_line(proc, "geostrophy settings")
        # Not a partial state; and a partial given to `climatology`.
        proc = self.merge([paths[0]], out, expect=3)
        self.assert_one_error_line(proc, "not a seatilt partial")
        proc = self.clim([by_month], out, expect=3)
        self.assert_one_error_line(proc, "seatilt merge")
        self.assertEqual(eu.temp_leftovers(self.tmp), [])
        self.assertFalse(os.path.exists(out))


if __name__ == "__main__":
    unittest.main()
