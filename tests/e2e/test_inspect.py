#!/usr/bin/python3
"""End-to-end: `seatilt inspect` text and --json (brief cli_contract.md).

Inputs are small versions of the project's invented demo scenarios
(scripts/make_ssh.py demo_basin: Tessaline Sea, regional, absolute;
demo_global: Pelagora, global periodic anomaly) and the packed int16 file of
the equivalence test. Expected values come from the generator's own arrays.
"""

import json
import os
import re
import sys
import unittest

import numpy as np
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402

JSON_KEYS = ["file", "format", "variable", "chosen_because", "kind", "standard_name", "units",
             "to_metres_scale", "to_metres_offset", "packed", "scale_factor", "add_offset",
             "nt", "ny", "nx", "lat_name", "lon_name", "lat_min", "lat_max", "lat_step_deg",
             "lat_descending", "lon_min", "lon_max", "lon_step_deg", "periodic", "calendar",
             "times", "fill_fraction"]


def says_periodic(text):
    """True when the text report calls the longitude axis periodic ("periodic: yes",
    "(global, periodic)"), False for "periodic: no", "not periodic", or no mention."""
    if re.search(r"\b(not|non)[ -]?periodic|periodic\W+(no|false)\b", text, re.I):
        return False
    return re.search(r"periodic", text, re.I) is not None


class Inspect(eu.SeatiltTestCase):

    def inspect_json(self, path, *options):
        proc = eu.run(["inspect", path, "--json", *options])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assertEqual(eu.stderr_lines(proc), [], eu.describe(proc))
        info = json.loads(proc.stdout)
        self.assertIsInstance(info, dict)
        missing = [k for k in JSON_KEYS if k not in info]
        self.assertEqual(missing, [], "JSON keys missing")
        return info

    def check_common(self, info, path, fld, nt):
        self.assertEqual(info["file"], path)
        self.assertEqual((info["nt"], info["ny"], info["nx"]), (nt, fld.lat.size, fld.lon.size))
        self.assertEqual(info["lat_name"], "lat")
        self.assertEqual(info["lon_name"], "lon")
        self.assertAlmostEqual(info["lat_min"], fld.lat.min(), places=9)
        self.assertAlmostEqual(info["lat_max"], fld.lat.max(), places=9)
        self.assertAlmostEqual(info["lon_min"], fld.lon.min(), places=9)
        self.assertAlmostEqual(info["lon_max"], fld.lon.max(), places=9)
        self.assertAlmostEqual(abs(info["lat_step_deg"]), abs(fld.lat[1] - fld.lat[0]), places=9)
        self.assertAlmostEqual(abs(info["lon_step_deg"]), abs(fld.lon[1] - fld.lon[0]), places=9)
        self.assertEqual(info["lat_descending"], bool(fld.lat[1] < fld.lat[0]))
        self.assertAlmostEqual(info["fill_fraction"], float(np.isnan(fld.eta).mean()), delta=1e-9)
        if fld.times is not None:
            self.assertEqual(info["calendar"], "standard")
            self.assertEqual(len(info["times"]), nt)
            for iso, t in zip(info["times"], fld.times):
                self.assertTrue(iso.startswith(t.strftime("%Y-%m-%dT%H:%M")), iso)

    def test_basin_json_and_text(self):
        fld = make_ssh.demo_basin(step=0.5, days=3)
        path = make_ssh.write_ssh(self.path("tessaline.nc"), fld)
        info = self.inspect_json(path)
        self.check_common(info, path, fld, 3)
        self.assertEqual(info["format"], "netCDF-4")
        self.assertEqual(info["variable"], "sea_height")
        self.assertIn("standard_name", info["chosen_because"])
        self.assertEqual(info["kind"], "absolute")
        self.assertEqual(info["standard_name"], make_ssh.STD_ABSOLUTE)
        self.assertEqual(info["units"], "m")
        self.assertEqual((info["to_metres_scale"], info["to_metres_offset"]), (1.0, 0.0))
        self.assertFalse(info["packed"])
        self.assertFalse(info["periodic"])
        self.assertGreater(info["fill_fraction"], 0.02)   # invented coast and islands

        proc = eu.run(["inspect", path])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        text = proc.stdout
        for needle in (path, "sea_height", "absolute", str(fld.lat.size), str(fld.lon.size),
                       "2031-04-14", "2031-04-16"):
            self.assertIn(needle, text)
        self.assertFalse(says_periodic(text), "regional grid reported as periodic:\n" + text)

        # --units overrides the file's units
        info = self.inspect_json(path, "--units", "cm")
        self.assertEqual(info["units"], "cm")
        self.assertAlmostEqual(info["to_metres_scale"], 0.01, places=12)

    def test_global_json_and_text(self):
        fld = make_ssh.demo_global(step=2.0, days=2)
        path = make_ssh.write_ssh(self.path("pelagora.nc"), fld)
        info = self.inspect_json(path)
        self.check_common(info, path, fld, 2)
        self.assertEqual(info["variable"], "height_anomaly")
        self.assertEqual(info["kind"], "anomaly")
        self.assertEqual(info["standard_name"], make_ssh.STD_ANOMALY)
        self.assertTrue(info["periodic"])
        proc = eu.run(["inspect", path])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assertTrue(says_periodic(proc.stdout), "global grid not reported periodic:\n" + proc.stdout)
        self.assertIn("anomaly", proc.stdout)

    def test_packed_descending(self):
        p_in, f_in = self.path("packed.nc"), self.path("float.nc")
        fld, sf = make_ssh.write_pair(p_in, f_in, step=2.0)
        packed = make_ssh.flip_lat(make_ssh.to_lon_start(fld, -180.0))
        info = self.inspect_json(p_in)
        self.check_common(info, p_in, packed, 1)
        self.assertTrue(info["packed"])
        # float32 0.1 = 0.100000001490116; 10 printed significant digits identify it
        self.assertAlmostEqual(info["scale_factor"], float(sf), delta=1e-9 * float(sf))
        self.assertAlmostEqual(info["add_offset"], 20.0, places=12)
        self.assertEqual(info["units"], "cm")
        self.assertAlmostEqual(info["to_metres_scale"], 0.01, places=12)
        self.assertTrue(info["lat_descending"])
        self.assertTrue(info["periodic"])
        self.assertEqual(info["lon_min"], -180.0)

    def test_classic_without_time(self):
        fld = make_ssh.eddy_field(step=0.5)
        path = make_ssh.write_ssh(self.path("eddy3.nc"), fld, fmt="classic", no_time=True)
        info = self.inspect_json(path)
        self.assertEqual(info["format"], "classic")
        self.assertEqual((info["nt"], info["ny"], info["nx"]), (1, fld.lat.size, fld.lon.size))

    def test_two_candidates_and_variable_option(self):
        fld = make_ssh.eddy_field(step=0.5)
        path = make_ssh.write_ssh(self.path("two.nc"), fld)
        with netCDF4.Dataset(path, "a") as ds:
            v = ds.createVariable("height_anomaly", "f4", ("time", "lat", "lon"), fill_value=eu.FILL)
            v.standard_name = make_ssh.STD_ANOMALY
            v.units = "m"
            v[:] = ds.variables["sea_height"][:]
        proc = eu.run(["inspect", path, "--json"])
        self.assertEqual(proc.returncode, 3, eu.describe(proc))
        self.assert_one_error_line(proc, path)
        info = self.inspect_json(path, "--variable", "height_anomaly")
        self.assertEqual(info["variable"], "height_anomaly")
        self.assertEqual(info["kind"], "anomaly")

    def test_bad_files(self):
        text = self.path("readme.nc")
        with open(text, "w") as fh:
            fh.write("not a netCDF file\n")
        for args in (["inspect", text], ["inspect", text, "--json"],
                     ["inspect", self.path("absent.nc")]):
            with self.subTest(args=args):
                proc = eu.run(args)
                self.assertEqual(proc.returncode, 3, eu.describe(proc))
                self.assert_one_error_line(proc, args[1])


if __name__ == "__main__":
    unittest.main(verbosity=2)
