#!/usr/bin/python3
"""End-to-end: how the Python module runs.

- The input is not copied: Python's tracemalloc (which numpy reports its
  buffers to) sees only the output arrays allocated during a call, for
  contiguous, strided, Fortran-order and masked float32/float64 input.
- The GIL is released during the computation: another Python thread keeps
  running while one thread computes.
- The outputs: names, order, dtypes and shapes of a dict as documented, and a
  geostrophic check value: a uniform northward slope of 1 m per degree at
  45 N gives u = -(g0 / (f R1)) (180/pi) m s-1 (geostrophy on the sphere,
  e.g. Stewart, Introduction to Physical Oceanography, ch. 10; g0 = 9.80665
  m s-2, 3rd CGPM 1901; R1 = 6371008.7714 m, Moritz 2000; Omega =
  7.292115e-5 rad s-1, Groten 2004), exact for the 3-point stencil.
"""

import math
import os
import sys
import threading
import time
import tracemalloc
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import python_util as pu  # noqa: E402
from e2e_util import make_ssh  # noqa: E402

seatilt = None


def setUpModule():
    global seatilt
    seatilt = pu.import_seatilt()


def field(nt, ny, nx, dtype=np.float64):
    lat = np.linspace(-60.0, 60.0, ny)
    lon = np.linspace(0.0, 359.0, nx)
    phi, lam = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    eta = np.stack([0.3 * np.cos(phi) * np.sin(2 * lam + 0.1 * k) for k in range(nt)])
    return eta.astype(dtype), lat, lon


class Runtime(unittest.TestCase):

    def test_outputs(self):
        eta, lat, lon = field(2, 31, 40)
        out = seatilt.currents(eta, lat, lon)
        self.assertEqual(tuple(out), seatilt.FIELDS)
        self.assertEqual(seatilt.FIELDS[-1], "quality")
        for name, a in out.items():
            self.assertEqual(a.shape, eta.shape, name)
            self.assertEqual(a.dtype, np.int8 if name == "quality" else np.float32, name)
            self.assertTrue(a.flags.c_contiguous)
        out = seatilt.currents(eta[0], lat, lon, fields="speed", dtype="float64")
        self.assertEqual(list(out), ["speed", "quality"])
        self.assertEqual(out["speed"].shape, eta[0].shape)
        self.assertEqual(out["speed"].dtype, np.float64)
        self.assertIn("not total currents", seatilt.CAUTION)
        self.assertIn("navigation", seatilt.CAUTION)

    def test_uniform_slope_check_value(self):
        lat = np.arange(40.0, 50.01, 0.5)
        lon = np.arange(-30.0, -24.99, 0.5)
        eta = np.repeat((lat - 45.0)[:, None], lon.size, axis=1)  # 1 m per degree north
        out = seatilt.currents(eta, lat, lon, earth="sphere", dtype="float64")
        f = 2 * 7.292115e-5 * math.sin(math.radians(45.0))
        expected = -(9.80665 / (f * 6371008.7714)) * (180.0 / math.pi)
        j, i = int(np.argmin(abs(lat - 45.0))), 5
        self.assertAlmostEqual(out["u"][j, i] / expected, 1.0, places=10)
        self.assertLess(abs(out["v"][j, i]), 1e-12)
        self.assertEqual(out["quality"][j, i], 0)
        # cm in, same currents (UDUNITS: 1 cm = 0.01 m)
        out_cm = seatilt.currents(eta * 100.0, lat, lon, earth="sphere", dtype="float64",
                                  units="cm")
        self.assertAlmostEqual(out_cm["u"][j, i] / expected, 1.0, places=10)

    def test_no_copy_of_the_input(self):
        eta, lat, lon = field(4, 181, 360)
        wide = np.zeros(eta.shape[:-1] + (2 * eta.shape[-1],))
        wide[..., ::2] = eta
        masked = np.ma.masked_array(eta, mask=np.zeros(eta.shape, bool))
        masked[:, :10, :10] = np.ma.masked
        inputs = {"float64": eta, "float32": eta.astype(np.float32), "strided": wide[..., ::2],
                  "fortran": np.asfortranarray(eta), "masked": masked}
        for name, a in inputs.items():
            with self.subTest(layout=name):
                tracemalloc.start()
                try:
                    before = tracemalloc.get_traced_memory()[0]
                    out = seatilt.currents(a, lat, lon, fields="u")
                    peak = tracemalloc.get_traced_memory()[1] - before
                finally:
                    tracemalloc.stop()
                outputs = sum(v.nbytes for v in out.values())
                # Outputs plus small change; a copy of the input would add >= a.size * 4 bytes.
                self.assertLess(peak, outputs + 64 * 1024, f"{name}: {peak} bytes traced")
                self.assertGreater(a.size * 4, 64 * 1024)

    def test_gil_released(self):
        eta, lat, lon = field(6, 361, 720)
        done = threading.Event()
        result = {}

        def work():
            result["out"] = seatilt.currents(eta, lat, lon, threads=1, order=6)
            done.set()

        t = threading.Thread(target=work)
        ticks, start = 0, time.perf_counter()
        t.start()
        while not done.is_set():
            ticks += 1
        t.join()
        elapsed = time.perf_counter() - start
        self.assertIn("u", result["out"])
        # With the GIL held for the whole computation this loop could not run
        # while the worker computes (a few switches at most).
        self.assertGreater(ticks, 10000, f"{ticks} iterations in {elapsed:.2f} s")

    def test_global_demo_runs(self):
        # A small invented planet (make_ssh.demo_global) with continents: finite where not land.
        fld = make_ssh.demo_global(step=2.0, days=2)
        out = seatilt.currents(fld.eta, fld.lat, fld.lon, order=4)
        land = np.isnan(fld.eta)
        self.assertTrue((out["quality"][land] & 8).all())
        self.assertTrue(np.isnan(out["u"][land]).all())
        self.assertGreater(np.isfinite(out["u"]).mean(), 0.5)


if __name__ == "__main__":
    unittest.main()
