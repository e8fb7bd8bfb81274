#!/usr/bin/python3
"""End-to-end: `seatilt quicklook` failures (README "Exit codes").

Each case is data: arguments, expected exit code, a word the single stderr
line must contain; after every failure nothing is left at the output path
and no temporary file beside it. Inputs: a small invented Tessaline Sea
(scripts/make_ssh.py demo_basin) and its `currents` output.
"""

import os
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402
import quicklook_data as qd  # noqa: E402


class QuicklookErrors(eu.SeatiltTestCase):

    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        import tempfile
        cls._shared = tempfile.TemporaryDirectory(prefix="seatilt-e2e-qle-")
        d = cls._shared.name
        cls.ssh = make_ssh.write_ssh(os.path.join(d, "tessaline.nc"),
                                     make_ssh.demo_basin(step=0.5, days=2))
        cls.uv = os.path.join(d, "tessaline_uv.nc")
        proc = eu.run(["currents", cls.ssh, "-o", cls.uv])
        assert proc.returncode == 0, eu.describe(proc)
        cls.junk = os.path.join(d, "junk.nc")
        with open(cls.junk, "w") as f:
            f.write("this is not netCDF\n")

    @classmethod
    def tearDownClass(cls):
        cls._shared.cleanup()

    def fails(self, args, code, mentions, out=None):
        out = out or self.path("map.png")
        proc = eu.run(["quicklook", *args, "-o", out, "--width", 400])
        self.assertEqual(proc.returncode, code, eu.describe(proc))
        self.assert_one_error_line(proc, mentions)
        self.assertEqual(eu.temp_leftovers(os.path.dirname(out)), [])
        return proc

    def test_usage_errors_exit_2(self):
        cases = [
            ([self.ssh, "--region", "10,20,30"], "--region"),
            ([self.ssh, "--region", "0,10,50,40"], "--region"),
            ([self.ssh, "--region", "0,10,-95,0"], "--region"),
            ([self.ssh, "--region", "10,20,-10,0"], "does not overlap"),
            ([self.ssh, "--range", "3,1"], "--range"),
            ([self.ssh, "--range", "a,b"], "--range"),
            ([self.ssh, "--time", "9"], "--time 9"),
            ([self.ssh, "--time", "-1"], "time"),
            ([self.ssh, "--width", "100"], "--width"),
            ([self.ssh, "--arrows"], "u and v"),
            ([self.uv, "--field", "quality"], "flag"),
            ([self.ssh, "--no-such-option"], "usage"),
        ]
        for args, mentions in cases:
            with self.subTest(args=args):
                self.fails(args, 2, mentions)
                self.assertFalse(os.path.exists(self.path("map.png")))

    def test_input_errors_exit_3(self):
        cases = [
            ([self.path("missing.nc")], "missing.nc"),
            ([self.junk], "junk.nc"),
            ([self.uv, "--field", "nothing"], "speed"),   # lists the drawable variables
        ]
        for args, mentions in cases:
            with self.subTest(args=args):
                self.fails(args, 3, mentions)
                self.assertFalse(os.path.exists(self.path("map.png")))

    def test_output_errors_exit_4(self):
        out = self.path("old.png")
        with open(out, "wb") as f:
            f.write(b"previous map")
        self.fails([self.ssh], 4, "exists", out=out)
        with open(out, "rb") as f:
            self.assertEqual(f.read(), b"previous map")   # left untouched
        proc = eu.run(["quicklook", self.ssh, "-o", os.path.join(self.tmp, "no-such-folder", "map.png")])
        self.assertEqual(proc.returncode, 4, eu.describe(proc))
        self.assert_one_error_line(proc, "folder")
        proc = eu.run(["quicklook", self.ssh, "-o", self.ssh, "--force"])
        self.assertEqual(proc.returncode, 4, eu.describe(proc))
        self.assert_one_error_line(proc, "input")
        # --force replaces the old PNG with a complete new one
        proc = eu.run(["quicklook", self.ssh, "-o", out, "--force", "--width", 400])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assertEqual(eu.stderr_lines(proc), [])          # quiet when not a terminal
        self.assertEqual(qd.read_png(out).shape[1], 400)
        self.assertEqual(eu.temp_leftovers(self.tmp), [])

    def test_negative_region_numbers_parse(self):
        out = self.path("neg.png")
        proc = eu.run(["quicklook", self.ssh, "-o", out, "--region", "-55,-40,30,45", "--width", 400])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assertTrue(os.path.isfile(out))


if __name__ == "__main__":
    unittest.main()
