#!/usr/bin/python3
"""`seatilt run` under faults: a second run while the first holds the lock,
SIGTERM, kill -9 in the middle of a file and the rerun, a read-only output
folder (docs/run.md, "Faults")."""

from __future__ import annotations

import datetime as dt
import fcntl
import os
import shutil
import signal
import subprocess
import tempfile
import time
import unittest

import numpy as np

from e2e_util import BIN, SeatiltTestCase, describe, read_vars, run
import run_data as rd

DAYS = rd.days(dt.date(2031, 9, 1), 3)
JOB = """
    name = "pelagora-slow"
    input = "in/ssh_%Y%m%d.nc"
    output = "out/uv_%Y%m%d.nc"
    [currents]
    fields = "u,v,speed"
    threads = 1
    rows = 8
    """


class Faults(SeatiltTestCase):
    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        cls._data = tempfile.TemporaryDirectory(prefix="seatilt-e2e-slow-")
        cls.slow = rd.slow_input(os.path.join(cls._data.name, "slow.nc"))

    @classmethod
    def tearDownClass(cls):
        cls._data.cleanup()

    def setUp(self):
        super().setUp()
        self.job = rd.write_job(self.path("pelagora.toml"), JOB)
        os.makedirs(self.path("in"), exist_ok=True)
        for d in DAYS:  # every day's input is the same slow file
            os.symlink(self.slow, self.inp(d))

    def inp(self, d):
        return os.path.join(self.tmp, "in", d.strftime("ssh_%Y%m%d.nc"))

    def out(self, d):
        return os.path.join(self.tmp, "out", d.strftime("uv_%Y%m%d.nc"))

    def start(self):
        return subprocess.Popen([BIN, "run", self.job, "--from", DAYS[0].isoformat(),
                                 "--to", DAYS[-1].isoformat()],
                                stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)

    def wait_for(self, proc, condition, what, timeout=60.0):
        """Poll CONDITION every 10 ms while PROC runs; fail if PROC ends first."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if condition():
                return
            if proc.poll() is not None:
                out, err = proc.communicate()
                self.fail(f"run ended (exit {proc.returncode}) before {what}: {err!r}")
            time.sleep(0.01)
        proc.kill()
        self.fail(f"timeout waiting for {what}")

    def temp_of(self, d):
        name = "." + os.path.basename(self.out(d)) + ".tmp-"
        return [p for p in rd.temporaries(self.tmp) if os.path.basename(p).startswith(name)]

    def assert_no_torn_outputs(self):
        """Every file at an output path is complete (seatilt_status written last)."""
        for d in DAYS:
            if os.path.exists(self.out(d)):
                self.assertEqual(rd.status(self.out(d)), "complete", self.out(d))

    def test_lock_refuses_a_second_run_and_sigterm_stops_cleanly(self):
        first = self.start()
        self.wait_for(first, lambda: self.temp_of(DAYS[0]), "the first temporary file")
        second = run(["run", self.job, "--date", DAYS[0].isoformat()])
        self.assertEqual(second.returncode, 75, describe(second))  # EX_TEMPFAIL (sysexits.h)
        self.assert_one_error_line(
            second, f"{self.job}: another run holds the lock {self.job}.lock (pid {first.pid}, started ")
        self.assertIn("try again later", second.stderr)

        first.send_signal(signal.SIGTERM)
        out, err = first.communicate(timeout=60)
        self.assertEqual(first.returncode, 128 + signal.SIGTERM, err)
        self.assertIn("interrupted by signal 15; temporary file removed", err)
        self.assertIn("stopped by SIGTERM", err.splitlines()[-1])
        self.assertEqual(rd.temporaries(self.tmp), [])
        self.assertFalse(os.path.exists(self.out(DAYS[-1])))
        self.assert_no_torn_outputs()
        # flock is released with the process: the lock can be taken again.
        with open(self.job + ".lock") as f:
            fcntl.flock(f, fcntl.LOCK_EX | fcntl.LOCK_NB)

    def test_kill_9_mid_write_then_rerun_completes_only_what_is_missing(self):
        proc = self.start()
        self.wait_for(proc, lambda: self.temp_of(DAYS[1]), "the second day's temporary file")
        proc.kill()  # SIGKILL: no handler runs
        proc.communicate(timeout=60)
        self.assertEqual(rd.status(self.out(DAYS[0])), "complete")
        self.assertFalse(os.path.exists(self.out(DAYS[1])), "torn file at the output path")
        self.assertFalse(os.path.exists(self.out(DAYS[2])))
        self.assertTrue(self.temp_of(DAYS[1]), "kill -9 leaves the temporary file")
        left = self.temp_of(DAYS[1])
        done_before = os.stat(self.out(DAYS[0])).st_mtime_ns

        rerun = run(["run", self.job, "--from", DAYS[0].isoformat(), "--to", DAYS[-1].isoformat()],
                    timeout=300)
        self.assertEqual(rerun.returncode, 0, describe(rerun))  # the lock died with the process
        for p in left:
            self.assertIn(f"removed {p}", rerun.stderr)
        self.assertIn("2031-09-01 skipped", rerun.stderr)
        self.assertIn("2031-09-02 done", rerun.stderr)
        self.assertIn("2031-09-03 done", rerun.stderr)
        self.assertEqual(os.stat(self.out(DAYS[0])).st_mtime_ns, done_before)
        self.assertEqual(rd.temporaries(self.tmp), [])
        self.assert_no_torn_outputs()
        # Same input every day: the rerun's files equal the first one, value for value.
        ref = read_vars(self.out(DAYS[0]), ["u", "v", "speed", "quality"])
        for d in DAYS[1:]:
            got = read_vars(self.out(d), ["u", "v", "speed", "quality"])
            for name, a in ref.items():
                np.testing.assert_array_equal(got[name], a, err_msg=f"{name} of {d}")

    def test_read_only_output_folder(self):
        """Exit 4, one error line per day, nothing in the folder. Tests run as
        root, whom folder permissions do not stop, so the run is made as
        nobody (uid 65534) with setpriv(1) from util-linux."""
        for d in DAYS:
            os.remove(self.inp(d))
            rd.small_input(self.inp(d), d)
        out = self.folder("out")
        os.chmod(out, 0o555)
        locks = self.folder("locks")
        os.chmod(locks, 0o777)
        os.chmod(self.tmp, 0o755)
        job = rd.write_job(self.path("ro.toml"), JOB.replace(
            'name = "pelagora-slow"', f'name = "ro"\n    lock_file = "{locks}/ro.lock"'))
        prefix = []
        if os.geteuid() == 0:
            setpriv = shutil.which("setpriv")
            if not setpriv:
                self.skipTest("running as root and setpriv(1) is missing: cannot drop privileges")
            prefix = [setpriv, "--reuid=65534", "--regid=65534", "--clear-groups"]
            probe = subprocess.run(prefix + [BIN, "--version"], capture_output=True, text=True)
            if probe.returncode != 0:
                self.skipTest(f"the binary cannot run as uid 65534 ({probe.stderr.strip()!r})")
        proc = subprocess.run(prefix + [BIN, "run", job, "--from", DAYS[0].isoformat(), "--to",
                                        DAYS[-1].isoformat(), "--quiet"],
                              capture_output=True, text=True, stdin=subprocess.DEVNULL, timeout=120)
        self.assertEqual(proc.returncode, 4, describe(proc))
        errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("seatilt: error: ")]
        self.assertEqual(len(errors), 3, describe(proc))
        for d, ln in zip(DAYS, errors):
            self.assertIn(f"output folder {out}", ln)
            self.assertIn("Permission denied", ln)
            self.assertIn(f"(date {d.isoformat()})", ln)
        self.assertIn("3 failed (output not written)", proc.stderr)
        self.assertEqual(os.listdir(out), [])
        os.chmod(out, 0o755)


if __name__ == "__main__":
    unittest.main()
