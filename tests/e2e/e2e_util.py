"""Shared helpers for seatilt's end-to-end tests (tests/e2e/test_*.py).

Each test script is a plain unittest program run with /usr/bin/python3. The
binary comes from SEATILT_BIN (default <repo>/build/seatilt), the repository
root from SEATILT_SOURCE_DIR (default: two folders above this file). Test
inputs are written by the project's own generator, scripts/make_ssh.py.
"""

from __future__ import annotations

import glob
import os
import re
import subprocess
import sys
import tempfile
import unittest

import numpy as np
import netCDF4

HERE = os.path.dirname(os.path.abspath(__file__))
REPO = os.path.abspath(os.environ.get("SEATILT_SOURCE_DIR") or os.path.join(HERE, "..", ".."))
BIN = os.path.abspath(os.environ.get("SEATILT_BIN") or os.path.join(REPO, "build", "seatilt"))

sys.path.insert(0, os.path.join(REPO, "scripts"))
import make_ssh  # noqa: E402,F401  (the project's generator, re-exported to the tests)

# Contract values (brief cli_contract.md; CF 1.12 for the names)
FILL = np.float32(9.96921e36)   # netCDF default float fill (REFERENCES.md section 9)
FLAG_MASKS = [1, 2, 4, 8, 16, 32, 64]
FLAG_MEANINGS = ("one_sided_difference beta_plane_equator blended_equator missing_height "
                 "masked_equator_band masked_pole masked_near_coast")
BIT = {"one_sided": 1, "beta": 2, "blend": 4, "missing": 8, "equator_mask": 16,
       "pole": 32, "coast_mask": 64}
FLOAT_FIELDS = ["u", "v", "speed", "vorticity", "strain_normal", "strain_shear", "strain",
                "okubo_weiss"]
ERROR_LINE = re.compile(r"^seatilt: error: ")


def require_binary():
    """Fail loudly (not skip) when the binary under test is missing."""
    if not (os.path.isfile(BIN) and os.access(BIN, os.X_OK)):
        raise RuntimeError(f"seatilt binary not found at {BIN} (set SEATILT_BIN or build first)")


def run(args, timeout=120, env=None):
    """Run the binary with ARGS; return CompletedProcess (text stdout/stderr)."""
    e = dict(os.environ)
    e.pop("SEATILT_VERBOSE", None)
    if env:
        e.update(env)
    return subprocess.run([BIN] + [str(a) for a in args], capture_output=True, text=True,
                          timeout=timeout, stdin=subprocess.DEVNULL, env=e)


def describe(proc):
    """One readable block of a finished process for assertion messages."""
    return (f"\n  command: {' '.join(map(str, proc.args))}\n  exit: {proc.returncode}"
            f"\n  stdout: {proc.stdout[-2000:]!r}\n  stderr: {proc.stderr[-2000:]!r}")


def stderr_lines(proc):
    return [ln for ln in proc.stderr.splitlines() if ln.strip()]


def read_vars(path, names=None):
    """Return {name: float64 array with NaN where masked} plus 'quality' as int."""
    out = {}
    with netCDF4.Dataset(path) as ds:
        for name in (names or ds.variables):
            if name not in ds.variables:
                continue
            v = ds.variables[name]
            a = v[:]
            if name == "quality":
                out[name] = np.ma.getdata(a).astype(np.int64) & 0xFF
            elif np.issubdtype(v.dtype, np.floating):
                out[name] = np.ma.filled(np.ma.asarray(a, dtype=np.float64), np.nan)
            else:
                out[name] = np.ma.getdata(a)
    return out


def temp_leftovers(folder):
    """Hidden temporary files the writer may have left (".<name>.tmp-*")."""
    return sorted(glob.glob(os.path.join(folder, ".*tmp*")))


class SeatiltTestCase(unittest.TestCase):
    """Base: a fresh temporary folder per test and small run helpers."""

    maxDiff = 4000

    @classmethod
    def setUpClass(cls):
        require_binary()

    def setUp(self):
        self._tmp = tempfile.TemporaryDirectory(prefix="seatilt-e2e-")
        self.tmp = self._tmp.name

    def tearDown(self):
        self._tmp.cleanup()

    def path(self, *parts):
        p = os.path.join(self.tmp, *parts)
        os.makedirs(os.path.dirname(p), exist_ok=True)
        return p

    def folder(self, *parts):
        p = os.path.join(self.tmp, *parts)
        os.makedirs(p, exist_ok=True)
        return p

    def currents(self, inputs, out, *options, expect=0):
        """Run `seatilt currents INPUTS -o OUT OPTIONS`; assert the exit code; return proc."""
        if isinstance(inputs, str):
            inputs = [inputs]
        proc = run(["currents", *inputs, "-o", out, *options])
        self.assertEqual(proc.returncode, expect, "unexpected exit code" + describe(proc))
        return proc

    def assert_one_error_line(self, proc, mentions):
        """Exactly one non-empty stderr line, in the contract's form, naming MENTIONS."""
        lines = stderr_lines(proc)
        self.assertEqual(len(lines), 1, "expected exactly one line on stderr" + describe(proc))
        self.assertRegex(lines[0], ERROR_LINE, describe(proc))
        self.assertIn(mentions, lines[0], describe(proc))
        return lines[0]
