#!/usr/bin/python3
"""End-to-end: `seatilt section` exit codes and one-line errors (README "Exit codes").

Usage and section-file errors -> exit 2, naming the offending text; input
problems (unreadable file, a vertex outside the grid, netCDF output without
time) -> exit 3 naming the file; an existing output without --force -> exit 4
with the file untouched. Never a file or a temporary left at the output path.
"""

import os
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import section_data as sd  # noqa: E402
from e2e_util import make_ssh  # noqa: E402


class SectionErrors(eu.SeatiltTestCase):

    def setUp(self):
        super().setUp()
        eta = sd.zonal_slope_eta(-20.0, 0.02)
        self.inp = sd.write(self.path("in.nc"), sd.field(make_ssh.axis(38, 42, 0.2),
                                                         make_ssh.axis(-23, -17, 0.2), eta))
        self.outdir = self.folder("out")

    def fails(self, args, code, mentions, out="x.csv"):
        outp = os.path.join(self.outdir, out)
        proc = eu.run(["section", *args, "-o", outp])
        self.assertEqual(proc.returncode, code, eu.describe(proc))
        self.assert_one_error_line(proc, mentions)
        self.assertFalse(os.path.exists(outp), "a file was left at the output path")
        self.assertEqual(os.listdir(self.outdir), [], "temporary file left")
        return proc

    def test_bad_lines_are_usage_errors_quoting_the_text(self):
        cases = [("-21 40, -19", "'-19'"), ("-21 40; -19 40", "-21 40; -19 40"),
                 ("-21 40, abc 40", "'abc 40'"), ("-21 40,, -19 40", "point 2 is empty"),
                 ("-21 95, -19 40", "latitude outside"), ("", "no points"),
                 ("-21 40, -21 40", "repeats"), ("nan 40, -19 40", "not a number")]
        for line, mention in cases:
            with self.subTest(line=line):
                self.fails([self.inp, "--line", line], 2, mention)

    def test_usage_errors(self):
        self.fails([self.inp], 2, "no section")
        self.fails([self.inp, "--line", "-21 40, -19 40"], 2, "must end in .csv or .nc", out="x.txt")
        self.fails([self.inp, "--line", "-21 40, -19 40", "--spacing", "0"], 2, "--spacing")
        self.fails([self.inp, "--line", "-21 40, -19 40", "--depth", "-5"], 2, "--depth")
        self.fails([self.inp, "--line", "-21 40, -19 40", "--equator-band", "40"], 2, "--equator-band")
        self.fails([self.inp, "--line", "-21 40, -19 40", "--earth", "flat"], 2, "--earth")
        self.fails([self.inp, "--line", "-21 40, -19 40", "--spacing", "0.000001"], 2, "larger --spacing")

    def test_bad_section_file(self):
        bad = self.path("bad.toml")
        with open(bad, "w") as fh:
            fh.write('[[section]]\nname = "a"\nline = "-21 40, -19 40"\nwidth = 3\n')
        self.fails([self.inp, "--sections", bad], 2, "unknown key 'width'")
        self.fails([self.inp, "--sections", self.path("missing.toml")], 2, "missing.toml")
        with open(bad, "w") as fh:
            fh.write('[[section]]\nname = "a"\nline = "-21 40, -19 40"\n'
                     '[[section]]\nname = "a"\nline = "-21 41, -19 41"\n')
        self.fails([self.inp, "--sections", bad], 2, "used twice")

    def test_input_errors(self):
        self.fails([self.path("absent.nc"), "--line", "-21 40, -19 40"], 3, "absent.nc")
        p = self.fails([self.inp, "--line", "-21 40, -19 45"], 3, "outside the grid")
        self.assertIn(self.inp, p.stderr)
        notime = sd.write(self.path("notime.nc"), sd.field(make_ssh.axis(38, 42, 0.2),
                                                           make_ssh.axis(-23, -17, 0.2),
                                                           sd.zonal_slope_eta(-20.0, 0.02)),
                          no_time=True)
        self.fails([notime, "--line", "-21 40, -19 40"], 3, "no time coordinate", out="x.nc")
        # ... but CSV works without time (empty time column)
        out = self.path("notime.csv")
        proc = eu.run(["section", notime, "--line", "-21 40, -19 40", "-o", out])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        _, rows = sd.read_csv(out)
        self.assertEqual(rows[0]["time"], "")

    def test_existing_output_is_left_untouched(self):
        outp = os.path.join(self.outdir, "keep.nc")
        with open(outp, "w") as fh:
            fh.write("precious")
        proc = eu.run(["section", self.inp, "--line", "-21 40, -19 40", "-o", outp])
        self.assertEqual(proc.returncode, 4, eu.describe(proc))
        self.assert_one_error_line(proc, "exists")
        with open(outp) as fh:
            self.assertEqual(fh.read(), "precious")
        self.assertEqual(os.listdir(self.outdir), ["keep.nc"])


if __name__ == "__main__":
    unittest.main()
