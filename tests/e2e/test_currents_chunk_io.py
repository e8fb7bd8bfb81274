#!/usr/bin/python3
"""End-to-end: the direct chunk paths (raw chunk reads, chunks compressed by
seatilt and stored with HDF5's direct chunk write) give the same files as the
plain netCDF-C path (SEATILT_CHUNK_IO=netcdf; docs/performance.md).

Reference: netCDF-C itself through `ncdump -h -s` (identical apart from
history and date_created, which hold the command line and the time) and
Debian's python3-netCDF4 (stored values, byte for byte) and xarray (decoded
values, fill -> NaN).
"""

import os
import subprocess
import sys
import unittest

import numpy as np
import xarray as xr
import netCDF4

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402

sys.path.insert(0, os.path.join(eu.REPO, "scripts"))
import bench_data  # noqa: E402

FIELDS = ["u", "v", "speed", "vorticity", "strain_normal", "strain_shear", "strain",
          "okubo_weiss", "quality"]


def header(path):
    """ncdump -h -s without the name line and the two time-stamped attributes."""
    text = subprocess.run(["ncdump", "-h", "-s", path], capture_output=True, text=True,
                          check=True).stdout
    return [ln for ln in text.splitlines()[1:]
            if ":history = " not in ln and ":date_created = " not in ln]


class ChunkIo(eu.SeatiltTestCase):

    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        bench_data.N_EDDIES = 300  # a lighter Meridra: quick to generate

    def make_inputs(self, n):
        """N daily 1/4 degree maps (deflate 4 + shuffle, one chunk per map)."""
        return [bench_data.write(self.path("in", f"day{d}.nc"), step=0.25, day=d) for d in range(n)]

    def assert_same(self, a, b):
        self.assertEqual(header(a), header(b))
        with netCDF4.Dataset(a) as x, netCDF4.Dataset(b) as y:
            for name in FIELDS + ["lat", "lon", "time"]:
                x[name].set_auto_maskandscale(False)
                y[name].set_auto_maskandscale(False)
                self.assertEqual(x[name][:].tobytes(), y[name][:].tobytes(), name)
        with xr.open_dataset(a) as x, xr.open_dataset(b) as y:
            for name in FIELDS:
                self.assertTrue(np.array_equal(x[name].values, y[name].values, equal_nan=True), name)
            self.assertGreater(int(np.isnan(x["u"].values).sum()), 0)  # land and equator are fill

    def test_direct_paths_equal_netcdf_c(self):
        (src,) = self.make_inputs(1)
        fast, plain = self.path("out", "fast.nc"), self.path("out", "plain.nc")
        proc = eu.run(["currents", src, "-o", fast, "--threads", "2"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        proc = eu.run(["currents", src, "-o", plain, "--threads", "1", "--rows", "50"],
                      env={"SEATILT_CHUNK_IO": "netcdf"})
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assert_same(fast, plain)

    def test_batch_in_one_process_equals_single_runs(self):
        days = self.make_inputs(3)
        out = self.folder("batch")
        self.currents(days, out + "/", "--threads", "2")
        for d, src in enumerate(days):
            single = self.path("single", f"day{d}.nc")
            proc = eu.run(["currents", src, "-o", single], env={"SEATILT_CHUNK_IO": "netcdf"})
            self.assertEqual(proc.returncode, 0, eu.describe(proc))
            self.assert_same(os.path.join(out, f"day{d}_currents.nc"), single)
        self.assertEqual(eu.temp_leftovers(out), [])


if __name__ == "__main__":
    unittest.main()
