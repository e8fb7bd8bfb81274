#!/usr/bin/python3
"""End-to-end: `seatilt section` outputs.

- CSV exactly as DESIGN.md "Other outputs": header row, one row per time step
  and section, ISO 8601 times (checked against cftime), depth columns;
- several named sections from a TOML file;
- multi-time and several inputs;
- CF discrete sampling geometry netCDF (featureType timeSeries, CF 1.12 ch. 9 /
  appendix H.2) read by xarray: cf_role timeseries_id, standard_name
  ocean_volume_transport_across_line (CF standard-name table v83), units, the
  same numbers as the CSV (float32 on disk).
"""

import datetime as dt
import os
import sys
import unittest

import cftime
import numpy as np
import xarray as xr

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import section_data as sd  # noqa: E402
from e2e_util import make_ssh  # noqa: E402

SECTIONS_TOML = """# invented gates of the Tessaline shelf
[[section]]
name = "north gate"
line = "-22 44, -18 46"

[[section]]
name = "bent, \\"quoted\\" passage"
line = '''-22 42,
          -20 43.5, -18 42'''
"""


def multi_time_field(times, amp=(0.02, 0.04, -0.01)):
    """eta rising eastward at a rate that changes per step (m per degree)."""
    eta = lambda la, lo, k: amp[k] * (lo + 20.0) + 0.001 * (la - 44.0)  # noqa: E731
    return sd.field(make_ssh.axis(40, 48, 0.1), make_ssh.axis(-24, -16, 0.1), eta, times=times)


class SectionOutputs(eu.SeatiltTestCase):

    def setUp(self):
        super().setUp()
        self.times = [dt.datetime(2031, 4, 14), dt.datetime(2031, 4, 15), dt.datetime(2031, 4, 16, 12)]
        self.inp = sd.write(self.path("days.nc"), multi_time_field(self.times))
        self.toml = self.path("gates.toml")
        with open(self.toml, "w") as fh:
            fh.write(SECTIONS_TOML)

    def run_ok(self, *args):
        proc = eu.run(["section", *args])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])
        return proc

    def test_csv_rows_per_time_and_section(self):
        out = self.path("t.csv")
        self.run_ok(self.inp, "--sections", self.toml, "--line", "-21 47, -19 47", "--name", "cap",
                    "-o", out, "--depth", "1000")
        header, rows = sd.read_csv(out)
        self.assertEqual(header, sd.CSV_DEPTH_COLUMNS)
        self.assertEqual(len(rows), 3 * 3)            # 3 steps x 3 sections
        names = [r["section"] for r in rows[:3]]
        self.assertEqual(names, ["cap", "north gate", 'bent, "quoted" passage'])
        # ISO 8601 times, decoded independently with cftime from the input file.
        import netCDF4
        with netCDF4.Dataset(self.inp) as ds:
            tv = ds["time"]
            want = [d.strftime("%Y-%m-%dT%H:%M:%SZ")
                    for d in cftime.num2date(tv[:], tv.units, tv.calendar)]
        self.assertEqual([r["time"] for r in rows[::3]], want)
        # Transport scales with the step's eastward slope (the meridional part is
        # the same in every step): differences between steps are in ratio.
        cap = [sd.value(r, "transport_per_depth_m2s") for r in rows if r["section"] == "cap"]
        self.assertAlmostEqual((cap[1] - cap[0]) / (cap[2] - cap[0]), (0.04 - 0.02) / (-0.01 - 0.02),
                               delta=1e-6)
        for r in rows:
            self.assertAlmostEqual(sd.value(r, "transport_m3s"),
                                   sd.value(r, "transport_per_depth_m2s") * 1000.0,
                                   delta=1e-6 * abs(sd.value(r, "transport_m3s")) + 1e-6)

    def test_csv_without_depth_has_six_columns(self):
        out = self.path("plain.csv")
        self.run_ok(self.inp, "--line", "-21 47, -19 47", "-o", out)
        header, rows = sd.read_csv(out)
        self.assertEqual(header, sd.CSV_COLUMNS)
        self.assertEqual(len(rows), 3)
        self.assertEqual(rows[0]["section"], "line")

    def test_several_inputs_in_order(self):
        second = sd.write(self.path("later.nc"), multi_time_field(
            [dt.datetime(2031, 4, 17), dt.datetime(2031, 4, 18)], amp=(0.01, 0.02)))
        out = self.path("two.csv")
        self.run_ok(self.inp, second, "--line", "-21 47, -19 47", "-o", out)
        _, rows = sd.read_csv(out)
        self.assertEqual([r["time"][:10] for r in rows],
                         ["2031-04-14", "2031-04-15", "2031-04-16", "2031-04-17", "2031-04-18"])
        # netCDF: sorted by time even when the inputs are given out of order
        nc = self.path("two.nc")
        self.run_ok(second, self.inp, "--line", "-21 47, -19 47", "-o", nc)
        with xr.open_dataset(nc) as ds:
            self.assertEqual([str(t)[:10] for t in ds["time"].values],
                             ["2031-04-14", "2031-04-15", "2031-04-16", "2031-04-17", "2031-04-18"])
            got = ds["transport_per_depth"].values[0]
        want = np.array([sd.value(r, "transport_per_depth_m2s") for r in rows])
        np.testing.assert_allclose(got, want, rtol=1e-6)

    def test_netcdf_timeseries_read_by_xarray(self):
        csv_out, nc_out = self.path("s.csv"), self.path("s.nc")
        common = [self.inp, "--sections", self.toml, "--depth", "4000"]
        self.run_ok(*common, "-o", csv_out)
        self.run_ok(*common, "-o", nc_out)
        _, rows = sd.read_csv(csv_out)
        with xr.open_dataset(nc_out) as ds:
            self.assertEqual(ds.attrs["featureType"], "timeSeries")
            self.assertIn("CF-1.12", ds.attrs["Conventions"])
            self.assertEqual(ds.attrs["seatilt_status"], "complete")
            self.assertIn("equivalent-barotropic", ds.attrs["comment"])
            self.assertIn("not for navigation", ds.attrs["comment"].lower())
            self.assertEqual(dict(ds.sizes)["section"], 2)
            self.assertEqual(dict(ds.sizes)["time"], 3)
            self.assertEqual(ds["section_name"].attrs["cf_role"], "timeseries_id")
            self.assertEqual(list(ds["section_name"].values), ["north gate", 'bent, "quoted" passage'])
            q = ds["volume_transport"]
            self.assertEqual(q.attrs["standard_name"], "ocean_volume_transport_across_line")
            self.assertEqual(q.attrs["units"], "m3 s-1")
            self.assertIn("equivalent-barotropic", q.attrs["comment"])
            self.assertEqual(ds["volume_transport_sv"].attrs["units"], "sverdrup")  # UDUNITS-2 name
            self.assertEqual(ds["transport_per_depth"].attrs["units"], "m2 s-1")
            self.assertEqual(ds["mean_normal_velocity"].attrs["units"], "m s-1")
            self.assertEqual(ds["transport_per_depth"].dtype, np.float32)
            self.assertEqual(ds["lat"].attrs["standard_name"], "latitude")
            self.assertEqual(list(ds["lon_start"].values), [-22.0, -22.0])
            self.assertEqual(list(ds["lat_end"].values), [46.0, 42.0])
            self.assertEqual(list(ds["vertex_count"].values), [2, 3])
            self.assertEqual([str(t)[:19] for t in ds["time"].values],
                             ["2031-04-14T00:00:00", "2031-04-15T00:00:00", "2031-04-16T12:00:00"])
            for r in rows:
                k = 0 if r["section"] == "north gate" else 1
                t = [x["time"] for x in rows].index(r["time"]) // 2
                for var, col in (("transport_per_depth", "transport_per_depth_m2s"),
                                 ("mean_normal_velocity", "mean_normal_velocity_ms"),
                                 ("excluded_fraction", "excluded_fraction"),
                                 ("volume_transport", "transport_m3s"),
                                 ("volume_transport_sv", "transport_sv")):
                    self.assertAlmostEqual(float(ds[var].values[k, t]), sd.value(r, col),
                                           delta=1e-6 * abs(sd.value(r, col)) + 1e-7, msg=var)
                self.assertAlmostEqual(float(ds["section_length"].values[k]), sd.value(r, "length_m"),
                                       delta=1e-3)

    def test_force_replaces_existing_output(self):
        out = self.path("r.csv")
        with open(out, "w") as fh:
            fh.write("old\n")
        self.run_ok(self.inp, "--line", "-21 47, -19 47", "-o", out, "--force")
        header, _ = sd.read_csv(out)
        self.assertEqual(header, sd.CSV_COLUMNS)


if __name__ == "__main__":
    unittest.main()
