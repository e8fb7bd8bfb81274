#!/usr/bin/python3
"""End-to-end: exit codes, one-line errors and no partial output (brief cli_contract.md).

Bad inputs -> exit 3, exactly one stderr line "seatilt: error: <file>: ...",
nothing at the output path and no hidden temporary file in the output folder.
Existing output without --force -> exit 4 and the file untouched; with --force
-> replaced. Bad option values -> exit 2. A batch with one bad input -> exit 5
with the good outputs written.
"""

import datetime
import os
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402


def small_eddy(**kw):
    """A small valid field (41 x 51 cells) for quick runs."""
    return make_ssh.eddy_field(lat0=35.0, lon0=-40.0, step=0.2, half_width=4.0, **kw)


class BadInputs(eu.SeatiltTestCase):
    """Every invalid input: exit 3, one line naming the file, no output, no temp file."""

    def expect_input_error(self, bad_path, *options):
        outdir = self.folder("out")
        out = os.path.join(outdir, "result.nc")
        proc = self.currents(bad_path, out, *options, expect=3)
        self.assert_one_error_line(proc, bad_path)
        self.assertFalse(os.path.exists(out), "a file was left at the output path" + eu.describe(proc))
        self.assertEqual(os.listdir(outdir), [], "the output folder is not empty (temporary file left?)")
        return proc

    def good_file(self, name, fmt="netcdf4", **kw):
        return make_ssh.write_ssh(self.path(name), small_eddy(), fmt=fmt, **kw)

    def test_truncated_netcdf4(self):
        p = self.good_file("cut4.nc")
        data = open(p, "rb").read()
        with open(p, "wb") as fh:
            fh.write(data[: len(data) // 2])
        self.expect_input_error(p)

    def test_truncated_classic(self):
        # netCDF-C silently zero-fills reads past the end of a truncated classic
        # file (checked with ncdump 4.9.0: exit 0, zeros), so the reader must
        # compare the file size with what the header implies.
        p = self.good_file("cut3.nc", fmt="classic")
        data = open(p, "rb").read()
        with open(p, "wb") as fh:
            fh.write(data[: len(data) * 6 // 10])
        self.expect_input_error(p)

    def test_text_file_named_nc(self):
        p = self.path("notes.nc")
        with open(p, "w") as fh:
            fh.write("lat,lon,height\n35.0,-40.0,0.2\n")
        self.expect_input_error(p)

    def test_empty_file(self):
        p = self.path("empty.nc")
        open(p, "wb").close()
        self.expect_input_error(p)

    def test_missing_file(self):
        self.expect_input_error(self.path("does_not_exist.nc"))

    def test_no_height_variable(self):
        p = self.path("sst_only.nc")
        fld = small_eddy()
        make_ssh.write_ssh(p, fld, variable="sst", standard_name="sea_surface_temperature",
                           units="K", var_attrs={"long_name": "sea surface temperature"})
        self.expect_input_error(p)

    def test_two_candidates(self):
        p = self.good_file("two.nc")  # sea_height: sea_surface_height_above_geoid
        with netCDF4.Dataset(p, "a") as ds:
            v = ds.createVariable("height_anomaly", "f4", ("time", "lat", "lon"),
                                  fill_value=eu.FILL)
            v.standard_name = make_ssh.STD_ANOMALY
            v.units = "m"
            v[:] = ds.variables["sea_height"][:] * 0.5
        proc = self.expect_input_error(p)
        # the message should help: it names the candidates
        line = eu.stderr_lines(proc)[0]
        self.assertIn("sea_height", line)
        self.assertIn("height_anomaly", line)
        # --variable resolves it
        self.currents(p, self.path("ok", "two_currents.nc"), "--variable", "height_anomaly")

    def test_non_monotonic_latitude(self):
        p = self.good_file("nonmono.nc")
        with netCDF4.Dataset(p, "a") as ds:
            lat = ds.variables["lat"][:]
            lat[10], lat[11] = lat[11], lat[10]
            ds.variables["lat"][:] = lat
        self.expect_input_error(p)

    def test_all_fill(self):
        fld = small_eddy()
        fld.eta[:] = np.nan
        p = make_ssh.write_ssh(self.path("allfill.nc"), fld)
        self.expect_input_error(p)

    def test_all_fill_second_time_step(self):
        one = small_eddy()
        fld = make_ssh.SshField(one.lat, one.lon,
                                np.concatenate([one.eta, np.full_like(one.eta, np.nan)]),
                                make_ssh.daily_times(datetime.datetime(2030, 1, 1), 2))
        p = make_ssh.write_ssh(self.path("fill_step2.nc"), fld)
        self.expect_input_error(p)

    def test_non_length_units(self):
        p = self.good_file("degc.nc", units="degC")
        self.expect_input_error(p)
        # --units overrides the file's units (DESIGN.md option table)
        self.currents(p, self.path("ok", "degc_currents.nc"), "--units", "m")

    def test_ellipsoidal_height(self):
        # REFERENCES.md section 1: includes the +-100 m geoid, refuse.
        p = self.good_file("ellipsoid.nc", standard_name=make_ssh.STD_ELLIPSOID)
        self.expect_input_error(p)


class OutputRules(eu.SeatiltTestCase):

    def setUp(self):
        super().setUp()
        self.inp = make_ssh.write_ssh(self.path("in", "eddy.nc"), small_eddy())

    def test_existing_output_without_force(self):
        out = self.path("out", "existing.nc")
        with open(out, "wb") as fh:
            fh.write(b"precious results of yesterday\n")
        os.utime(out, (1_000_000_000, 1_000_000_000))
        before = (open(out, "rb").read(), os.stat(out).st_mtime_ns)
        proc = self.currents(self.inp, out, expect=4)
        self.assert_one_error_line(proc, "existing.nc")
        self.assertEqual((open(out, "rb").read(), os.stat(out).st_mtime_ns), before,
                         "the existing output was modified")
        self.assertEqual(eu.temp_leftovers(os.path.dirname(out)), [])

        self.currents(self.inp, out, "--force")
        self.assertNotEqual(os.stat(out).st_mtime_ns, before[1])
        with netCDF4.Dataset(out) as ds:
            self.assertIn("u", ds.variables)
            self.assertIn("quality", ds.variables)
        self.assertEqual(eu.temp_leftovers(os.path.dirname(out)), [])

    def test_output_folder_missing(self):
        out = os.path.join(self.tmp, "no_such_folder", "sub", "result.nc")
        proc = self.currents(self.inp, out, expect=4)
        self.assertEqual(len(eu.stderr_lines(proc)), 1, eu.describe(proc))
        self.assertFalse(os.path.exists(out))

    def test_bad_option_values(self):
        out = self.path("out", "r.nc")
        cases = [["--order", "3"], ["--order", "two"], ["--equator", "foo"],
                 ["--equator-band", "abc"], ["--coast", "sideways"], ["--earth", "flat"],
                 ["--gravity", "heavy"], ["--deflate", "10"], ["--significant-digits", "8"],
                 ["--threads", "zero"], ["--no-such-option"], ["--fields", "u,no_such_field"]]
        for opts in cases:
            with self.subTest(opts=opts):
                proc = eu.run(["currents", self.inp, "-o", out, *opts])
                self.assertEqual(proc.returncode, 2, eu.describe(proc))
                self.assertTrue(proc.stderr.strip(), "usage error without a message")
                self.assertFalse(os.path.exists(out))
        proc = eu.run(["currents", "-o", out])  # no inputs
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        proc = eu.run(["no-such-command"])
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        self.assertEqual(os.listdir(os.path.dirname(out)), [])

    def test_single_input_into_folder(self):
        outdir = self.folder("outdir")
        self.currents(self.inp, outdir)  # existing folder, no trailing slash
        self.assertEqual(sorted(os.listdir(outdir)), ["eddy_currents.nc"])

    def test_batch_with_one_bad_input(self):
        a = make_ssh.write_ssh(self.path("in", "alpha.nc"), small_eddy())
        b = make_ssh.write_ssh(self.path("in", "beta.nc"),
                               make_ssh.eddy_field(lat0=-30.0, lon0=100.0, step=0.2, kind="anomaly"))
        bad = self.path("in", "broken.nc")
        with open(bad, "w") as fh:
            fh.write("this is not netCDF\n")
        outdir = self.folder("batch")
        proc = self.currents([a, bad, b], outdir + "/", expect=5)
        self.assert_one_error_line(proc, bad)
        self.assertEqual(sorted(os.listdir(outdir)), ["alpha_currents.nc", "beta_currents.nc"])
        for name in ("alpha_currents.nc", "beta_currents.nc"):
            with netCDF4.Dataset(os.path.join(outdir, name)) as ds:
                self.assertIn("u", ds.variables)

    def test_batch_needs_a_folder(self):
        a = make_ssh.write_ssh(self.path("in", "one.nc"), small_eddy())
        out = self.path("out", "single_file.nc")
        proc = eu.run(["currents", a, self.inp, "-o", out])
        self.assertEqual(proc.returncode, 2, eu.describe(proc))
        self.assertFalse(os.path.exists(out))


if __name__ == "__main__":
    unittest.main(verbosity=2)
