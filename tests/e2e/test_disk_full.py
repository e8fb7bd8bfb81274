#!/usr/bin/python3
"""A full disk: writes fail part-way through an output (README "Exit codes",
docs/run.md "Faults"). The run gets exit 4, one error line per output, and
nothing is left at the output path or as a temporary file.

A full file system is simulated without mounting one: the child runs with a
file-size limit (RLIMIT_FSIZE, setrlimit(2)) smaller than its output and with
SIGXFSZ ignored, so that a write(2) past the limit fails as it would on a
full disk (EFBIG instead of ENOSPC; both are write errors to the library)."""

from __future__ import annotations

import datetime as dt
import os
import resource
import signal
import subprocess
import unittest

from e2e_util import BIN, SeatiltTestCase, describe, stderr_lines, temp_leftovers
import run_data as rd

DAYS = rd.days(dt.date(2031, 10, 1), 2)


def limited(limit_bytes):
    """preexec_fn for subprocess: files may not grow past LIMIT_BYTES."""
    def apply():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # ignored signals survive exec
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit_bytes, limit_bytes))
    return apply


class DiskFull(SeatiltTestCase):
    def setUp(self):
        super().setUp()
        self.inputs = [rd.small_input(self.path("in", d.strftime("ssh_%Y%m%d.nc")), d)
                       for d in DAYS]
        # Size of a normal output, to set the limit to a third of it.
        ref = self.path("ref", "uv.nc")
        self.currents(self.inputs[0], ref)
        self.limit = os.path.getsize(ref) // 3
        self.assertGreater(self.limit, 4096)

    def run_limited(self, args):
        return subprocess.run([BIN] + args, capture_output=True, text=True, timeout=120,
                              stdin=subprocess.DEVNULL, preexec_fn=limited(self.limit))

    def test_currents_single_output(self):
        out = self.path("out", "uv.nc")
        proc = self.run_limited(["currents", self.inputs[0], "-o", out])
        self.assertEqual(proc.returncode, 4, describe(proc))
        self.assert_one_error_line(proc, out)
        self.assertEqual(os.listdir(os.path.dirname(out)), [])
        self.assertEqual(temp_leftovers(self.tmp), [])

    def test_currents_batch(self):
        """Every output fails the same way: the batch reports the cause (exit 4)."""
        out = self.folder("batch")
        proc = self.run_limited(["currents"] + self.inputs + ["-o", out + "/"])
        self.assertEqual(proc.returncode, 4, describe(proc))
        errors = [ln for ln in stderr_lines(proc) if ln.startswith("seatilt: error: ")]
        self.assertEqual(len(errors), len(self.inputs), describe(proc))
        self.assertEqual(os.listdir(out), [])
        self.assertEqual(temp_leftovers(self.tmp), [])

    def test_run_job(self):
        job = rd.write_job(self.path("full.toml"), """
            name = "tessaline-full"
            input = "in/ssh_%Y%m%d.nc"
            output = "out/uv_%Y%m%d.nc"
            """)
        self.folder("out")
        proc = self.run_limited(["run", job, "--from", DAYS[0].isoformat(), "--to",
                                 DAYS[-1].isoformat(), "--quiet"])
        self.assertEqual(proc.returncode, 4, describe(proc))
        errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("seatilt: error: ")]
        self.assertEqual(len(errors), len(DAYS), describe(proc))
        self.assertEqual(os.listdir(self.path("out")), [])
        self.assertEqual(rd.temporaries(self.tmp), [])
        # With room again, the rerun completes every day.
        again = subprocess.run([BIN, "run", job, "--from", DAYS[0].isoformat(), "--to",
                                DAYS[-1].isoformat(), "--quiet"],
                               capture_output=True, text=True, timeout=120, stdin=subprocess.DEVNULL)
        self.assertEqual(again.returncode, 0, describe(again))
        for d in DAYS:
            self.assertEqual(rd.status(self.path("out", d.strftime("uv_%Y%m%d.nc"))), "complete")


if __name__ == "__main__":
    unittest.main()
