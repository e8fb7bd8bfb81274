#!/usr/bin/python3
"""`seatilt profile`: bad inputs and options give one error line, the documented exit
code and nothing at the output path (README "Exit codes"). Data: profile_data.py."""

import os
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import profile_data as pd  # noqa: E402


class ProfileErrors(eu.SeatiltTestCase):

    def setUp(self):
        super().setUp()
        self.lat, self.lon = pd.grid(30.0, 34.0, -40.0, -36.0, 1.0)
        c = pd.ts_case((0.0, 100.0, 500.0), self.lat, self.lon)
        self.c = c
        self.ts = pd.write_hydro(self.path("ts.nc"), self.lat, self.lon, c["depth"],
                                 {"theta": ("pt", c["pt"]), "salt": ("sp", c["sp"])})
        self.ssh = pd.write_heights(self.path("ssh.nc"), self.lat, self.lon,
                                    pd.jet_heights(self.lat, self.lon))
        self.out = self.path("out.nc")

    def fails(self, args, code, mentions):
        proc = eu.run(["profile", *args])
        self.assertEqual(proc.returncode, code, eu.describe(proc))
        line = self.assert_one_error_line(proc, mentions)
        self.assertFalse(os.path.exists(self.out), "output left behind" + eu.describe(proc))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])
        return line

    def hydro(self, name, fields, **kw):
        return pd.write_hydro(self.path(name), self.lat, self.lon, self.c["depth"], fields, **kw)

    def test_usage_errors(self):
        self.fails([self.ssh, "-o", self.out], 2, "--density")
        self.fails(["--density", self.ts, "-o", self.out], 2, "height file")
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--reference", "bottom"], 2,
                   "--reference")
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--levels", "0,abc"], 2, "--levels")
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--levels", "0,900"], 2,
                   "deeper than the deepest level")
        self.fails(["--density", self.ts, "-o", self.out, "--reference", "no-motion:2000"], 2,
                   "deeper than the deepest level")
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--fields", "speed"], 2, "--fields")
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--rho0", "10"], 2, "--rho0")
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--order", "3"], 2, "--order")

    def test_input_errors(self):
        junk = self.path("junk.nc")
        with open(junk, "w") as fh:
            fh.write("not netCDF at all\n")
        self.fails([self.ssh, "--density", junk, "-o", self.out], 3, "junk.nc")
        self.fails([junk, "--density", self.ts, "-o", self.out], 3, "junk.nc")
        # In-situ temperature only: refused with the reason.
        insitu = self.hydro("insitu.nc", {"t": ("t", self.c["pt"]), "s": ("sp", self.c["sp"])})
        self.fails([self.ssh, "--density", insitu, "-o", self.out], 3, "in-situ temperature")
        # A height anomaly cannot anchor the full profile.
        sla = pd.write_heights(self.path("sla.nc"), self.lat, self.lon,
                               pd.jet_heights(self.lat, self.lon), kind="anomaly")
        self.fails([sla, "--density", self.ts, "-o", self.out], 3, "sea level anomaly")
        # Vertical coordinate in a unit that is neither length nor pressure.
        bad_units = self.hydro("units.nc", {"theta": ("pt", self.c["pt"]), "salt": ("sp", self.c["sp"])},
                               vertical_attrs={"units": "degC"})
        self.fails([self.ssh, "--density", bad_units, "-o", self.out], 3, "neither a length")
        # Practical salinity with absolute-salinity units.
        bad_s = self.hydro("sal.nc", {"theta": ("pt", self.c["pt"]), "salt": ("sa", self.c["sp"])})
        bad_s_ok = eu.run(["profile", self.ssh, "--density", bad_s, "-o", self.out])
        self.assertEqual(bad_s_ok.returncode, 0, eu.describe(bad_s_ok))  # g kg-1 is fine for SA
        os.remove(self.out)
        # A chosen variable without a usable standard_name.
        self.fails([self.ssh, "--density", self.ts, "-o", self.out, "--temperature", "lat"], 3,
                   "standard_name")
        # Non-overlapping grids.
        far = pd.write_heights(self.path("far.nc"), self.lat - 60.0, self.lon,
                               pd.jet_heights(self.lat, self.lon))
        self.fails([far, "--density", self.ts, "-o", self.out], 3, "does not overlap")

    def test_output_errors(self):
        with open(self.out, "w") as fh:
            fh.write("keep me")
        proc = eu.run(["profile", self.ssh, "--density", self.ts, "-o", self.out])
        self.assertEqual(proc.returncode, 4, eu.describe(proc))
        self.assert_one_error_line(proc, "exists")
        with open(self.out) as fh:
            self.assertEqual(fh.read(), "keep me")
        proc = eu.run(["profile", self.ssh, "--density", self.ts, "-o", self.out, "--force"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        os.remove(self.out)
        proc = eu.run(["profile", self.ssh, "--density", self.ts, "-o",
                       os.path.join(self.tmp, "nope", "out.nc")])
        self.assertEqual(proc.returncode, 4, eu.describe(proc))
        proc = eu.run(["profile", self.ssh, "--density", self.ts, "-o", self.ts])
        self.assertEqual(proc.returncode, 4, eu.describe(proc))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])


if __name__ == "__main__":
    unittest.main()
