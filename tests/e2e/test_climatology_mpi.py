#!/usr/bin/python3
"""MPI: `mpirun -n 2 seatilt climatology` equals the serial run, and
`mpirun -n 2 seatilt currents A B C -o DIR/` writes the same files as the
serial run. Skipped (with the reason) only when mpirun is absent or the
binary was built without MPI.

The serial run is the reference: one Welford pass over every file. The MPI
run deals files to ranks and merges the two states (Chan, Golub & LeVeque
1983), exact in real arithmetic, so the double states agree to 1e-12.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import test_climatology_merge as tm  # noqa: E402

MPIRUN = shutil.which("mpirun")


def mpi_built():
    proc = subprocess.run(["ldd", eu.BIN], capture_output=True, text=True)
    return "libmpi" in proc.stdout


def mpirun(args, ranks=2, timeout=180):
    # As root (CI) OpenMPI needs --allow-run-as-root; 2 ranks on a machine with
    # fewer free slots need --oversubscribe.
    cmd = [MPIRUN, "--allow-run-as-root", "--oversubscribe", "-n", str(ranks), eu.BIN,
           *[str(a) for a in args]]
    env = dict(os.environ)
    env.setdefault("OMPI_MCA_btl", "self,vader")   # single machine: no network transports
    env.setdefault("OMP_NUM_THREADS", "1")
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout,
                          stdin=subprocess.DEVNULL, env=env)


@unittest.skipIf(MPIRUN is None, "mpirun not found (Debian openmpi-bin): MPI tests skipped")
class MpiRuns(eu.SeatiltTestCase):

    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        if not mpi_built():
            raise unittest.SkipTest("seatilt was built without MPI (SEATILT_MPI=OFF): MPI tests skipped")

    def test_climatology_two_ranks_equal_serial(self):
        paths = tm.make_archive(self, n_files=5, days=6)
        serial, parallel = self.path("serial_state.nc"), self.path("mpi_state.nc")
        common = ["--earth", "sphere", "--by", "season"]
        proc = eu.run(["climatology", *paths, "-o", serial, *common, "--partial"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        proc = mpirun(["climatology", *paths, "-o", parallel, *common, "--partial"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        tm.assert_states_close(self, tm.read_state(parallel), tm.read_state(serial))

        out_s, out_p = self.path("serial.nc"), self.path("mpi.nc")
        self.assertEqual(eu.run(["climatology", *paths, "-o", out_s, *common]).returncode, 0)
        proc = mpirun(["climatology", *paths, "-o", out_p, *common])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        a, b = eu.read_vars(out_s, tm.OUTPUTS), eu.read_vars(out_p, tm.OUTPUTS)
        for name in tm.OUTPUTS:
            np.testing.assert_allclose(b[name], a[name], rtol=3e-7, atol=0, equal_nan=True,
                                       err_msg=name)
        # One file, two ranks: rank 1 has nothing to do and the result is unchanged.
        one_s, one_p = self.path("one_s.nc"), self.path("one_p.nc")
        self.assertEqual(eu.run(["climatology", paths[0], "-o", one_s, *common]).returncode, 0)
        proc = mpirun(["climatology", paths[0], "-o", one_p, *common])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        np.testing.assert_array_equal(eu.read_vars(one_p, ["u_var"])["u_var"],
                                      eu.read_vars(one_s, ["u_var"])["u_var"])

        # A bad input on either rank: exit 3, one error line, no output.
        bad = self.path("bad.nc")
        with open(bad, "w") as fh:
            fh.write("not netCDF")
        out = self.path("fail.nc")
        proc = mpirun(["climatology", paths[0], bad, paths[1], "-o", out])
        self.assertEqual(proc.returncode, 3, eu.describe(proc))
        errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("seatilt: error:")]
        self.assertEqual(len(errors), 1, eu.describe(proc))
        self.assertIn("bad.nc", errors[0])
        self.assertFalse(os.path.exists(out))
        self.assertEqual(eu.temp_leftovers(self.tmp), [])

    def test_currents_two_ranks_equal_serial(self):
        paths = tm.make_archive(self, n_files=3, days=2)
        ser, par = self.folder("serial"), self.folder("mpi")
        proc = eu.run(["currents", *paths, "-o", ser + "/", "--fields", "u,v,vorticity"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        proc = mpirun(["currents", *paths, "-o", par + "/", "--fields", "u,v,vorticity"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        names = sorted(os.listdir(ser))
        self.assertEqual(sorted(os.listdir(par)), names)
        self.assertEqual(len(names), 3)
        for n in names:
            a = eu.read_vars(os.path.join(ser, n), ["u", "v", "vorticity", "quality"])
            b = eu.read_vars(os.path.join(par, n), ["u", "v", "vorticity", "quality"])
            for k in a:
                np.testing.assert_array_equal(a[k], b[k], err_msg=f"{n} {k}")
        # Some inputs fail: exit 5 on every rank, the others written.
        bad = self.path("bad.nc")
        with open(bad, "w") as fh:
            fh.write("not netCDF")
        mixed = self.folder("mixed")
        proc = mpirun(["currents", paths[0], bad, paths[1], "-o", mixed + "/"])
        self.assertEqual(proc.returncode, 5, eu.describe(proc))
        self.assertEqual(len(os.listdir(mixed)), 2)
        errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("seatilt: error:")]
        self.assertEqual(len(errors), 1, eu.describe(proc))


if __name__ == "__main__":
    unittest.main()
