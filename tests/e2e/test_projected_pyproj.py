#!/usr/bin/python3
"""End-to-end: what `currents` and `inspect` say about a projected grid, checked
against pyproj (Debian python3-pyproj) and gdalinfo (Debian gdal-bin).

- Output 2-D latitude/longitude (CF auxiliary coordinates) equal pyproj's
  inverse projection of the node x/y.
- `inspect --json` reports the projection, its parameters, and scale factors
  and meridian convergence at sample nodes equal to pyproj's get_factors.
- gdalinfo reads the projected CRS of the output from the copied grid mapping.
"""

import json
import os
import shutil
import subprocess
import sys
import unittest

import numpy as np
import netCDF4
import pyproj

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import projected_data as pd  # noqa: E402


class ProjectedMetadata(eu.SeatiltTestCase):

    def make(self, mapping, lat0, lon0, half=12, step=25000.0, **kw):
        x, y = pd.grid_around(mapping, lat0, lon0, half, step)
        lat, lon = pd.node_lat_lon(mapping, x, y)
        src = self.path("in.nc")
        pd.write_projected(src, mapping, x, y, pd.Eddy(lat0, lon0, ell=0.03).eta(lat, lon), **kw)
        return src, x, y, lat, lon

    def test_output_keeps_projection_and_adds_lat_lon(self):
        src, x, y, lat, lon = self.make(pd.POLAR_NORTH, 78.0, 20.0)
        out = self.path("out.nc")
        self.currents(src, out)
        with netCDF4.Dataset(out) as ds:
            np.testing.assert_array_equal(ds["x"][:], x)
            np.testing.assert_array_equal(ds["y"][:], y)
            self.assertEqual(ds["x"].standard_name, "projection_x_coordinate")
            crs = ds["crs"]
            for k, v in pd.POLAR_NORTH.items():
                self.assertEqual(crs.getncattr(k), v, k)
            # pyproj's inverse of the node x/y (PROJ 9) to 1e-9 degrees
            np.testing.assert_allclose(ds["lat"][:], lat, rtol=0, atol=1e-9)
            dlon = np.remainder(ds["lon"][:] - lon + 180.0, 360.0) - 180.0
            self.assertLess(np.max(np.abs(dlon)), 1e-9)
            self.assertEqual(ds["lat"].units, "degrees_north")
            self.assertEqual(ds["lon"].standard_name, "longitude")
            for name in eu.FLOAT_FIELDS + ["quality"]:
                var = ds[name]
                self.assertEqual(var.dimensions, ("y", "x"), name)
                self.assertEqual(var.grid_mapping, "crs", name)
                self.assertEqual(sorted(var.coordinates.split()), ["lat", "lon"], name)
            # true east/north components keep the eastward/northward names (CF)
            self.assertEqual(ds["u"].standard_name, "surface_geostrophic_eastward_sea_water_velocity")
            self.assertEqual(ds["v"].standard_name, "surface_geostrophic_northward_sea_water_velocity")
            self.assertEqual(ds.seatilt_status, "complete")

    def test_inspect_reports_projection_and_factors(self):
        src, x, y, lat, lon = self.make(pd.POLAR_SOUTH, -68.0, -60.0)
        proc = eu.run(["inspect", src, "--json"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        info = json.loads(proc.stdout)
        self.assertEqual(info["grid_kind"], "projected")
        pr = info["projection"]
        self.assertEqual(pr["name"], "polar_stereographic")
        self.assertEqual(pr["variable"], "crs")
        self.assertIn("+proj=stere", pr["definition"])
        self.assertIn("+lat_ts=-71", pr["definition"])
        self.assertEqual(float(pr["parameters"]["standard_parallel"]), -71.0)
        proj = pyproj.Proj(pd.crs_of(pd.POLAR_SOUTH))
        self.assertGreaterEqual(len(pr["samples"]), 5)
        for s in pr["samples"]:
            j, i = s["row"], s["column"]
            self.assertAlmostEqual(s["x"], x[i], places=6)
            self.assertAlmostEqual(s["y"], y[j], places=6)
            self.assertAlmostEqual(s["lat"], lat[j, i], places=9)
            self.assertAlmostEqual(s["lon"], lon[j, i], places=9)
            f = proj.get_factors(lon[j, i], lat[j, i])
            self.assertAlmostEqual(s["meridional_scale"], f.meridional_scale, places=9)
            self.assertAlmostEqual(s["parallel_scale"], f.parallel_scale, places=9)
            self.assertAlmostEqual(s["convergence_deg"], f.meridian_convergence, places=7)
        # text report names the projection and its parameters
        proc = eu.run(["inspect", src])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        self.assertIn("polar_stereographic", proc.stdout)
        self.assertIn("standard_parallel", proc.stdout)

    @unittest.skipIf(shutil.which("gdalinfo") is None, "gdalinfo (Debian gdal-bin) not installed")
    def test_gdalinfo_reads_the_projected_crs(self):
        src, *_ = self.make(pd.POLAR_NORTH, 78.0, 20.0)
        out = self.path("out.nc")
        self.currents(src, out, "--fields", "u,v")
        proc = subprocess.run(["gdalinfo", f'NETCDF:"{out}":u'], capture_output=True, text=True,
                              timeout=60)
        self.assertEqual(proc.returncode, 0, proc.stderr)
        text = proc.stdout
        self.assertIn("PROJCRS", text)
        self.assertIn("Polar Stereographic", text)
        self.assertRegex(text, r'PARAMETER\["Latitude of standard parallel",70')
        self.assertRegex(text, r'PARAMETER\["Longitude of origin",-45')


if __name__ == "__main__":
    unittest.main()
