#!/usr/bin/python3
"""End-to-end: the hostile-input corpus of issue #9 (docs/hardening.md).

Every file of tests/e2e/hostile_data.py is given to currents, inspect,
section, climatology and quicklook. Contract (README.md "Exit codes"): the
documented exit code (3 for an unusable input; 0 where a command does not
need what is broken); on failure exactly one line on stderr, valid UTF-8 and
printable, naming the file and the variable; nothing at the output path and
no temporary file in the output folder; no crash and no hang (every run has
a timeout). Also: the memory refusal (SEATILT_MAX_MEMORY_MB and ulimit -v)
and inputs modified while they are read (truncated, overwritten in place,
replaced by rename, in a batch).
"""

import glob
import os
import resource
import shutil
import subprocess
import sys
import time
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import hostile_data as hd  # noqa: E402

TIMEOUT = 300  # seconds per run: generous for the AddressSanitizer build


def run_bytes(args, env=None, preexec_fn=None, timeout=TIMEOUT):
    """Run the binary; stdout and stderr as bytes (they must be checked as UTF-8)."""
    e = dict(os.environ)
    e.pop("SEATILT_VERBOSE", None)
    e.pop("SEATILT_MAX_MEMORY_MB", None)
    e.update(env or {})
    return subprocess.run([eu.BIN] + [str(a) for a in args], capture_output=True,
                          stdin=subprocess.DEVNULL, env=e, timeout=timeout,
                          preexec_fn=preexec_fn)


def command_args(command, path, out):
    """The command line of COMMAND on input PATH writing into folder OUT."""
    return {
        "currents": ["currents", path, "-o", os.path.join(out, "result.nc")],
        "inspect": ["inspect", path],
        # A line inside the regular test grid (30..36 N, 20..12 W).
        "section": ["section", path, "--line", "-18 31, -14 35", "-o", os.path.join(out, "s.csv")],
        "climatology": ["climatology", path, "-o", os.path.join(out, "clim.nc")],
        "quicklook": ["quicklook", path, "-o", os.path.join(out, "map.png")],
    }[command]


COMMANDS = ("currents", "inspect", "section", "climatology", "quicklook")
NAN, INF = float("nan"), float("inf")


class Case:
    """A hostile file: how to make it, the exit code of each command (3 unless
    listed), the variable the error line names (None: none is named) and a
    phrase of the problem it states."""

    def __init__(self, name, make, variable, says, codes=None):
        self.name, self.make, self.variable, self.says = name, make, variable, says
        self.codes = codes or {}


# A calendar or time unit that cannot be decoded matters only where dates are
# needed: currents copies the time axis, inspect prints "undecodable", a map
# goes without its date; section and climatology need the dates (exit 3).
NEEDS_DATES = {"currents": 0, "inspect": 0, "quicklook": 0}

CASES = [
    # Declared 2^33 x 2^33 grid, nothing written: refused before any coordinate is read.
    Case("huge_declared_dimensions", lambda p: hd.huge_declared(p), "lat", "would need about"),
    Case("height_never_written", lambda p: hd.unwritten_height(p), "ssh", "holds no data"),
    Case("nan_in_latitude", lambda p: hd.regular(p, lat=[30, 31, NAN, 33, 34]), "lat",
         "is not finite"),
    Case("inf_in_longitude", lambda p: hd.regular(p, lon=[-20, -19, INF, -17]), "lon",
         "is not finite"),
    Case("duplicated_latitude", lambda p: hd.regular(p, lat=[30, 31, 31, 33]), "lat",
         "not strictly monotonic"),
    Case("duplicated_longitude", lambda p: hd.regular(p, lon=[-20, -19, -18, -18, -17]), "lon",
         "not strictly monotonic"),
    Case("grid_1x1", lambda p: hd.regular(p, lat=[30], lon=[-20]), "ssh", "fewer than 2 points"),
    Case("grid_1xN", lambda p: hd.regular(p, lat=[30], lon=[-20, -19, -18, -17]), "ssh",
         "latitude axis has fewer than 2 points"),
    Case("grid_Nx1", lambda p: hd.regular(p, lat=[30, 31, 32], lon=[-20]), "ssh",
         "longitude axis has fewer than 2 points"),
    Case("scale_factor_zero", lambda p: hd.regular(p, var_attrs={"scale_factor": 0.0}), "ssh",
         "scale_factor"),
    # Unpacked latitudes all equal add_offset.
    Case("scale_factor_zero_on_latitude",
         lambda p: hd.regular(p, lat_attrs={"scale_factor": 0.0}), "lat", "not strictly monotonic"),
    Case("scale_factor_text", lambda p: hd.regular(p, var_attrs={"scale_factor": "0.01"}), "ssh",
         "attribute scale_factor is not numeric"),
    # Was an uncaught std::out_of_range (exit 70) before issue #9.
    Case("scale_factor_text_on_latitude",
         lambda p: hd.regular(p, lat_attrs={"scale_factor": "two"}), "lat",
         "attribute scale_factor is not a finite number"),
    Case("add_offset_empty_on_longitude",
         lambda p: hd.regular(p, lon_attrs={"add_offset": np.array([], dtype="f8")}), "lon",
         "attribute add_offset"),
    Case("missing_value_text", lambda p: hd.regular(p, var_attrs={"missing_value": "none"}), "ssh",
         "attribute missing_value is not numeric"),
    Case("valid_range_three_values",
         lambda p: hd.regular(p, var_attrs={"valid_range": np.array([1.0, 2.0, 3.0])}), "ssh",
         "valid_range does not have two values"),
    Case("units_numeric", lambda p: hd.regular(p, units=None, var_attrs={"units": 1.0}), "ssh",
         "has no units attribute"),
    Case("units_not_a_length", lambda p: hd.regular(p, units="furlongs per fortnight"), "ssh",
         "are not a length"),
    Case("units_garbage", lambda p: hd.regular(p, units="#*!@ m^^"), "ssh",
         "not understood by UDUNITS-2"),
    # Not UTF-8, with an escape sequence: shown as '?' on the error line.
    Case("units_bytes_not_utf8", lambda p: hd.regular(p, units=b"m\xff\xfe\x1b[31m"), "ssh",
         'units "m???[31m"'),
    Case("calendar_garbage", lambda p: hd.regular(p, calendar="martian"), "time", "martian",
         NEEDS_DATES),
    Case("time_units_garbage", lambda p: hd.regular(p, time_units="fortnights since yesterday"),
         "time", "fortnights", NEEDS_DATES),
    # A standard_name that is not UTF-8 is no CF name: no height variable.
    Case("standard_name_bytes_not_utf8",
         lambda p: hd.regular(p, standard_name=b"sea_surface_height\xff"), None,
         "ssh (sea_surface_height?)"),
    # Text the reader only carries along: every command works.
    Case("long_name_bytes_not_utf8",
         lambda p: hd.regular(p, var_attrs={"long_name": b"sea \xff\xc3 level\x07"}), None, "",
         {c: 0 for c in COMMANDS}),
]


class HostileInputs(eu.SeatiltTestCase):
    """One test per hostile file, one subtest per command."""

    def check(self, case, command, path, proc, outdir):
        expected = case.codes.get(command, 3)
        what = f"\n  case {case.name}, command {command}" + describe(proc)
        self.assertNotIn(proc.returncode, (-6, -11, 70, 134, 139), "crashed" + what)
        self.assertEqual(proc.returncode, expected, "unexpected exit code" + what)
        try:
            text = proc.stderr.decode("utf-8")
        except UnicodeDecodeError:
            self.fail("stderr is not valid UTF-8" + what)
        lines = [ln for ln in text.splitlines() if ln.strip()]
        if expected == 0:
            self.assertEqual(lines, [], "a successful run printed on stderr" + what)
            if command != "inspect":
                self.assertEqual(len(os.listdir(outdir)), 1, "no output written" + what)
            return
        self.assertEqual(len(lines), 1, "expected exactly one line on stderr" + what)
        line = lines[0]
        self.assertRegex(line, eu.ERROR_LINE, what)
        self.assertIn(path, line, "the line does not name the file" + what)
        if case.variable:
            self.assertIn(f"variable {case.variable}:", line, "the line does not name the variable" + what)
        self.assertIn(case.says, line, what)
        self.assertTrue(line.isprintable(), "control characters on the error line" + what)
        self.assertEqual(os.listdir(outdir), [], "something was left in the output folder" + what)

    def run_case(self, case):
        path = self.path(case.name + ".nc")
        case.make(path)
        for command in COMMANDS:
            with self.subTest(command=command):
                outdir = self.folder("out-" + command)
                proc = run_bytes(command_args(command, path, outdir))
                self.check(case, command, path, proc, outdir)
                shutil.rmtree(outdir)


def describe(proc):
    return (f"\n  command: {' '.join(map(str, proc.args))}\n  exit: {proc.returncode}"
            f"\n  stderr: {proc.stderr[-2000:]!r}")


def _add_case_tests():
    for case in CASES:
        setattr(HostileInputs, "test_" + case.name, lambda self, c=case: self.run_case(c))


_add_case_tests()


class MemoryLimits(eu.SeatiltTestCase):
    """Grids whose declared size exceeds the memory available: exit 3 with
    the bytes needed and available, before anything large is allocated."""

    def wide(self):
        # 64 x 2^21 cells: 16 MB of longitudes; one row band needs ~1.2 GiB.
        return hd.wide_unwritten(self.path("wide.nc"), nx=2**21)

    def expect_refusal(self, proc, path, outdir, source):
        what = describe(proc)
        self.assertEqual(proc.returncode, 3, what)
        lines = [ln for ln in proc.stderr.decode("utf-8").splitlines() if ln.strip()]
        self.assertEqual(len(lines), 1, what)
        self.assertIn(path, lines[0], what)
        self.assertIn("variable ssh:", lines[0], what)
        self.assertRegex(lines[0], r"would need about [0-9.]+ GiB, more than the [0-9.]+ MiB available", what)
        self.assertIn(source, lines[0], what)
        self.assertEqual(os.listdir(outdir), [], what)

    def test_cap_from_environment(self):
        path = self.wide()
        for command in ("currents", "climatology", "quicklook"):
            with self.subTest(command=command):
                outdir = self.folder("out-" + command)
                proc = run_bytes(command_args(command, path, outdir),
                                 env={"SEATILT_MAX_MEMORY_MB": "64"})
                self.expect_refusal(proc, path, outdir, "(SEATILT_MAX_MEMORY_MB)")

    def test_ulimit_v(self):
        limit = 900 << 20  # bytes of address space (ulimit -v 921600)

        def cap():
            resource.setrlimit(resource.RLIMIT_AS, (limit, limit))

        probe = run_bytes(["--version"], preexec_fn=cap)
        if probe.returncode != 0:
            # AddressSanitizer reserves terabytes of address space at start-up.
            self.skipTest("the binary does not start under ulimit -v (sanitizer build)")
        path = self.wide()
        outdir = self.folder("out")
        proc = run_bytes(command_args("currents", path, outdir), preexec_fn=cap)
        self.expect_refusal(proc, path, outdir, "RLIMIT_AS (ulimit -v)")


class ChangesWhileRead(eu.SeatiltTestCase):
    """An input modified while it is read: in place -> exit 3 and nothing at
    the output; replaced by rename -> the opened copy is read whole."""

    def big(self, name, fmt):
        return hd.big_regular(self.path(name), ny=400, nx=800, nt=8, fmt=fmt)

    def start(self, inputs, out, *extra):
        return subprocess.Popen([eu.BIN, "currents", *inputs, "-o", out, "--threads", "1", *extra],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                stdin=subprocess.DEVNULL)

    def wait_for_temporary(self, proc, folder, pattern=".*"):
        """Wait until the writer's hidden temporary output exists (reading has begun)."""
        deadline = time.time() + TIMEOUT
        while not glob.glob(os.path.join(folder, pattern)):
            if proc.poll() is not None or time.time() > deadline:
                self.fail("the run ended before its temporary output appeared")
            time.sleep(0.002)

    def finish(self, proc):
        out, err = proc.communicate(timeout=TIMEOUT)
        return proc.returncode, err.decode("utf-8")

    def changed_in_place(self, fmt, change):
        src = self.big("in.nc", fmt)
        outdir = self.folder("out")
        out = os.path.join(outdir, "uv.nc")
        proc = self.start([src], out)
        self.wait_for_temporary(proc, outdir)
        change(src)
        code, err = self.finish(proc)
        lines = [ln for ln in err.splitlines() if ln.strip()]
        self.assertEqual(code, 3, err)
        self.assertEqual(len(lines), 1, err)
        self.assertIn(src + ": variable ssh: the file changed while it was being read", lines[0])
        self.assertEqual(os.listdir(outdir), [], "output or temporary file left behind")

    def test_truncated_while_read_classic(self):
        self.changed_in_place("NETCDF3_64BIT_OFFSET",
                              lambda p: os.truncate(p, os.path.getsize(p) // 2))

    def test_overwritten_in_place_netcdf4(self):
        def scribble(p):
            with open(p, "r+b") as f:
                f.seek(os.path.getsize(p) // 2)
                f.write(np.random.default_rng(9).bytes(1 << 20))
        self.changed_in_place("NETCDF4", scribble)

    def test_replaced_by_rename_is_read_whole(self):
        src = self.big("in.nc", "NETCDF4")
        reference = os.path.join(self.folder("ref"), "uv.nc")
        self.assertEqual(self.finish(self.start([src], reference))[0], 0)
        outdir = self.folder("out")
        out = os.path.join(outdir, "uv.nc")
        proc = self.start([src], out)
        self.wait_for_temporary(proc, outdir)
        other = hd.regular(self.path("other.nc"), ny=400, nx=800, nt=8)
        os.replace(other, src)
        code, err = self.finish(proc)
        self.assertEqual((code, err), (0, ""))
        with netCDF4.Dataset(reference) as a, netCDF4.Dataset(out) as b:
            for name in ("u", "v", "vorticity"):
                np.testing.assert_array_equal(a[name][:], b[name][:])

    def test_truncated_in_a_batch(self):
        names = ["a", "b", "c"]
        inputs = [self.big(n + ".nc", "NETCDF3_64BIT_OFFSET") for n in names]
        outdir = self.folder("out")
        proc = self.start(inputs, outdir + "/")
        self.wait_for_temporary(proc, outdir, ".b_currents*")
        os.truncate(inputs[1], os.path.getsize(inputs[1]) // 3)
        code, err = self.finish(proc)
        lines = [ln for ln in err.splitlines() if ln.strip()]
        # b fails (exit 5: some inputs failed, the others were written), unless
        # it had been read whole before the truncation (exit 0).
        self.assertIn(code, (0, 5), err)
        produced = sorted(os.listdir(outdir))
        if code == 5:
            self.assertEqual(len(lines), 1, err)
            self.assertIn(inputs[1] + ": variable ssh: the file changed", lines[0])
            self.assertEqual(produced, ["a_currents.nc", "c_currents.nc"])
        else:
            self.assertEqual(produced, ["a_currents.nc", "b_currents.nc", "c_currents.nc"])
        for name in produced:
            with netCDF4.Dataset(os.path.join(outdir, name)) as ds:
                self.assertEqual(ds.getncattr("seatilt_status"), "complete")


if __name__ == "__main__":
    unittest.main()
