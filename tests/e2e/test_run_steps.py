#!/usr/bin/python3
"""`seatilt run` with [[quicklook]] and [[section]] steps (docs/run.md "Steps"):
maps and section files after each day's currents, skip when complete, redo
with --force or when stale/torn, exit codes of failing steps, JSON lines per
step, the plan of --dry-run, and no torn file after kill -9 or SIGTERM.

Inputs: scripts/make_ssh.py through run_data.py (an invented analytic eddy
at 35 N 40 W; a slow global wave for the fault tests). Check values: the
section from the eddy's centre eastwards has T = (g/f)(eta_end - eta_start)
(surface geostrophy, Stewart ch. 10; telescoping sum, docs/section.md) with
g0 = 9.80665 m s-2 (CGPM 1901) and f = 2 Omega sin(35 deg), Omega =
7.292115e-5 rad s-1 (Groten 2004); PNGs are decoded by the independent
decoder of quicklook_data.py.
"""

from __future__ import annotations

import csv
import datetime as dt
import json
import math
import os
import signal
import subprocess
import tempfile
import time
import unittest

from e2e_util import BIN, REPO, SeatiltTestCase, describe, make_ssh, run, stderr_lines
import quicklook_data as qd
import run_data as rd

DAYS = rd.days(dt.date(2031, 9, 1), 2)
JOB = """
    name = "tessaline-steps"
    input = "in/ssh_%Y%m%d.nc"
    output = "out/uv_%Y%m%d.nc"
    [currents]
    fields = ["u", "v", "speed"]
    threads = 1

    [[quicklook]]
    output = "maps/%Y/speed_%Y%m%d.png"
    arrows = true
    width = 400

    [[quicklook]]
    output = "maps/%Y/ssh_%Y%m%d.png"
    source = "input"
    width = 400
    region = [-44, -36, 32, 38]

    [[section]]
    output = "sections/east_%Y%m%d.csv"
    name = "centre to east"
    line = "-40 35, -36 35"
    depth = 1000
    """


def whole_png(path):
    """PNG signature (spec 5.2) at the start and the IEND chunk (11.2.5) at the end."""
    with open(path, "rb") as f:
        data = f.read()
    return data[:8] == qd.PNG_SIGNATURE and data[-12:] == b"\x00\x00\x00\x00IEND\xaeB`\x82"


def whole_csv(path):
    with open(path, "rb") as f:
        data = f.read()
    return data.startswith(b"time,section,") and data.endswith(b"\n")


class Steps(SeatiltTestCase):

    def setUp(self):
        super().setUp()
        self.job = rd.write_job(self.path("tessaline.toml"), JOB)
        for d in DAYS:
            rd.small_input(self.inp(d), d)

    def inp(self, d):
        return os.path.join(self.tmp, "in", d.strftime("ssh_%Y%m%d.nc"))

    def out(self, d):
        return os.path.join(self.tmp, "out", d.strftime("uv_%Y%m%d.nc"))

    def speed_map(self, d):
        return os.path.join(self.tmp, "maps", d.strftime("%Y/speed_%Y%m%d.png"))

    def ssh_map(self, d):
        return os.path.join(self.tmp, "maps", d.strftime("%Y/ssh_%Y%m%d.png"))

    def section(self, d):
        return os.path.join(self.tmp, "sections", d.strftime("east_%Y%m%d.csv"))

    def files(self, d):
        return [self.out(d), self.speed_map(d), self.ssh_map(d), self.section(d)]

    def run_job(self, *args, expect=0, job=None):
        proc = run(["run", job or self.job, "--from", DAYS[0].isoformat(), "--to",
                    DAYS[-1].isoformat(), *args])
        self.assertEqual(proc.returncode, expect, describe(proc))
        return proc

    def mtimes(self):
        return {p: os.stat(p).st_mtime_ns for d in DAYS for p in self.files(d)}

    def test_maps_and_sections_rerun_skips_force_redoes(self):
        log = self.path("logs", "run.jsonl")
        proc = self.run_job("--log-json", log)
        lines = stderr_lines(proc)
        self.assertEqual(len(lines), 2 * 4 + 1, describe(proc))  # per day: currents + 3 steps; summary
        for d in DAYS:
            day = d.isoformat()
            self.assertIn(f"{day} done: {self.out(d)}", proc.stderr)
            self.assertIn(f"{day} quicklook 1 done: {self.speed_map(d)}", proc.stderr)
            self.assertIn(f"{day} quicklook 2 done: {self.ssh_map(d)}", proc.stderr)
            self.assertIn(f"{day} section 1 done: {self.section(d)}", proc.stderr)
            self.assertEqual(rd.status(self.out(d)), "complete")
            for png in (self.speed_map(d), self.ssh_map(d)):
                img = qd.read_png(png)
                self.assertEqual(img.shape[1], 400)      # the step's width
                self.assertTrue(whole_png(png))
            self.assertTrue(whole_csv(self.section(d)))
        self.assertIn("2 done; steps: 6 done", lines[-1])
        self.assertEqual(rd.temporaries(self.tmp), [])

        # The section: one row, T = (g/f)(eta_end - eta_start), eta_start = 0.2 m
        # (the eddy's centre node), eta_end ~ 0 (about 4 radii away).
        with open(self.section(DAYS[0])) as f:
            rows = list(csv.DictReader(f))
        self.assertEqual(len(rows), 1)
        self.assertEqual(rows[0]["section"], "centre to east")
        self.assertEqual(rows[0]["time"], "2031-09-01T12:00:00Z")
        g_over_f = 9.80665 / (2 * 7.292115e-5 * math.sin(math.radians(35.0)))
        t = float(rows[0]["transport_per_depth_m2s"])
        self.assertAlmostEqual(t / (-g_over_f * 0.2), 1.0, delta=2e-3)
        self.assertAlmostEqual(float(rows[0]["transport_m3s"]), 1000 * t, delta=1e-6 * abs(t))

        with open(log) as f:
            entries = [json.loads(ln) for ln in f]
        self.assertEqual(len(entries), 8)
        steps = [e for e in entries if "step" in e]
        self.assertEqual([(e["date"], e["step"], e["step_index"]) for e in steps],
                         [(d.isoformat(), k, i) for d in DAYS
                          for k, i in (("quicklook", 1), ("quicklook", 2), ("section", 1))])
        for e in steps:
            self.assertEqual(set(e), {"time", "job", "date", "step", "step_index", "input",
                                      "output", "status", "seconds", "message"})
            self.assertEqual(e["status"], "done")
            self.assertIsNone(e["message"])
        self.assertEqual(steps[0]["input"], self.out(DAYS[0]))   # a map of the output
        self.assertEqual(steps[1]["input"], self.inp(DAYS[0]))   # source = "input"
        self.assertEqual(steps[2]["input"], self.inp(DAYS[0]))   # sections read the heights

        # Rerun: everything complete, nothing touched.
        before = self.mtimes()
        proc = self.run_job()
        self.assertIn("2 skipped (complete); steps: 6 skipped (complete)", stderr_lines(proc)[-1])
        self.assertEqual(self.mtimes(), before)
        plan = run(["run", self.job, "--from", DAYS[0].isoformat(), "--to", DAYS[-1].isoformat(),
                    "--dry-run"])
        first = plan.stdout.splitlines()[0]
        self.assertEqual(first.split()[:5], [DAYS[0].isoformat(), "skip", self.inp(DAYS[0]), "->",
                                             self.out(DAYS[0])])
        self.assertIn(f"+ quicklook 1 skip -> {self.speed_map(DAYS[0])}", first)
        self.assertIn(f"+ section 1 skip -> {self.section(DAYS[0])}", first)

        # A torn map is made again; the rest stays.
        with open(self.ssh_map(DAYS[1]), "r+b") as f:
            f.truncate(os.path.getsize(self.ssh_map(DAYS[1])) // 2)
        proc = self.run_job()
        self.assertIn(f"{DAYS[1].isoformat()} quicklook 2 redone: {self.ssh_map(DAYS[1])}",
                      proc.stderr)
        self.assertIn("steps: 1 redone, 5 skipped (complete)", stderr_lines(proc)[-1])
        self.assertTrue(whole_png(self.ssh_map(DAYS[1])))

        # --force: every day and every step again.
        before = self.mtimes()
        proc = self.run_job("--force", "--quiet")
        self.assertEqual(proc.stderr, "", describe(proc))
        after = self.mtimes()
        for p in before:
            self.assertNotEqual(after[p], before[p], p)
        # A currents output remade by hand (newer than its maps): the maps are stale.
        os.utime(self.out(DAYS[0]), ns=(after[self.out(DAYS[0])] + 10**9,) * 2)
        proc = self.run_job()
        self.assertIn(f"{DAYS[0].isoformat()} quicklook 1 redone", proc.stderr)
        self.assertIn(f"{DAYS[0].isoformat()} section 1 redone", proc.stderr)
        self.assertIn(f"{DAYS[1].isoformat()} quicklook 1 skipped", proc.stderr)

    def test_failing_steps_exit_codes(self):
        # A section vertex outside the grid: the day's currents and maps are
        # written, the step fails on its input: exit 5, one error line.
        job = rd.write_job(self.path("outside.toml"), JOB.replace("-40 35, -36 35", "-40 35, -20 35"))
        proc = self.run_job(job=job, expect=5)
        errors = [ln for ln in stderr_lines(proc) if ln.startswith("seatilt: error: ")]
        self.assertEqual(len(errors), 2, describe(proc))
        for d, ln in zip(DAYS, errors):
            self.assertIn(self.inp(d), ln)
            self.assertIn("outside the grid", ln)
            self.assertTrue(ln.endswith(f"(date {d.isoformat()}, section 1)"), ln)
            self.assertEqual(rd.status(self.out(d)), "complete")
            self.assertTrue(whole_png(self.speed_map(d)))
            self.assertFalse(os.path.exists(self.section(d)))
        self.assertIn("steps: 4 done, 2 failed (input)", stderr_lines(proc)[-1])
        self.assertEqual(rd.temporaries(self.tmp), [])

        # A field the output does not have: exit 5 as well (--force: the maps
        # of the same paths are complete, and a changed job file alone does
        # not make them stale).
        job = rd.write_job(self.path("field.toml"), JOB.replace("arrows = true", 'field = "vorticity"'))
        proc = self.run_job("--quiet", job=job, expect=0)
        proc = self.run_job("--quiet", "--force", job=job, expect=5)
        self.assertIn("vorticity", proc.stderr)
        self.assertIn("(date 2031-09-01, quicklook 1)", proc.stderr)

        # A map folder that cannot be created: an output failure, exit 4.
        job = rd.write_job(self.path("proc.toml"),
                           JOB.replace('output = "maps/%Y/speed_%Y%m%d.png"',
                                       'output = "/proc/seatilt-e2e-nowhere/speed_%Y%m%d.png"'))
        proc = self.run_job("--quiet", job=job, expect=4)
        self.assertIn("cannot create output folder", proc.stderr)
        self.assertIn("(date 2031-09-01, quicklook 1)", proc.stderr)
        self.assertIn("2 failed (output not written)", proc.stderr)

    def test_step_table_errors_name_file_and_line(self):
        for text, line, mention in [
                (JOB + "    feild = \"u\"\n", 24, "unknown key 'feild' in [[section]]"),
                (JOB.replace("width = 400\n\n", "width = 100\n\n", 1), 11,
                 "quicklook.width: 100 is outside 320..4096"),
                (JOB.replace('line = "-40 35, -36 35"', 'line = "-40 35"'), 22, "section.line: "),
                (JOB.replace('source = "input"', 'source = "input"\n    arrows = true'), 16,
                 "quicklook.arrows: needs u and v")]:
            with self.subTest(mention=mention):
                job = rd.write_job(self.path("bad", "job.toml"), text)
                proc = run(["run", job, "--date", "2031-09-01"])
                self.assertEqual(proc.returncode, 2, describe(proc))
                self.assert_one_error_line(proc, f"{job}:{line}: {mention}")
                self.assertEqual(os.listdir(os.path.dirname(job)), ["job.toml"])

    def test_example_regional_job_runs_with_its_steps(self):
        """config/tessaline-regional-daily.toml, copied beside an invented
        Tessaline input (adt in cm without a standard_name, as the job says):
        one day makes the currents, both maps and the gate's section file."""
        job = self.path("config", "tessaline-regional-daily.toml")
        with open(os.path.join(REPO, "config", "tessaline-regional-daily.toml")) as f:
            text = f.read()
        with open(job, "w") as f:
            f.write(text)
        day = dt.date(2031, 9, 3)
        basin = make_ssh.demo_basin(step=0.1, days=1, start=dt.datetime(2031, 9, 3))
        make_ssh.write_ssh(self.path("data", "tessaline", "adt", "2031-09",
                                     "tessaline_adt_20310903.nc"),
                           basin, variable="adt", units="cm", var_attrs={"standard_name": None})
        plan = run(["run", job, "--date", day.isoformat(), "--catch-up", "1", "--dry-run"])
        self.assertEqual(plan.returncode, 0, describe(plan))
        self.assertIn("+ quicklook 1 run -> ", plan.stdout)
        self.assertIn("+ quicklook 2 run -> ", plan.stdout)
        self.assertIn("+ section 1 run -> ", plan.stdout)
        proc = run(["run", job, "--date", day.isoformat(), "--catch-up", "1"])
        self.assertEqual(proc.returncode, 0, describe(proc))
        data = os.path.join(self.tmp, "data", "tessaline")
        self.assertEqual(rd.status(os.path.join(data, "currents", "2031-09",
                                                "tessaline_uv_20310903.nc")), "complete")
        for name in ("speed", "vorticity"):
            self.assertTrue(whole_png(os.path.join(data, "maps", "2031-09",
                                                   f"tessaline_{name}_20310903.png")))
        gate = os.path.join(data, "sections", "2031", "tessaline_north_gate_20310903.csv")
        with open(gate) as f:
            rows = list(csv.DictReader(f))
        self.assertEqual([r["section"] for r in rows], ["north gate"])
        self.assertLess(float(rows[0]["excluded_fraction"]), 0.5)


class StepFaults(SeatiltTestCase):
    """kill -9 and SIGTERM while steps run: no torn file at any output path;
    the rerun removes the dead run's temporary files and makes the rest."""

    DAYS3 = rd.days(dt.date(2031, 9, 1), 2)
    SLOW_JOB = """
        name = "pelagora-steps"
        input = "in/ssh_%Y%m%d.nc"
        output = "out/uv_%Y%m%d.nc"
        [currents]
        fields = "u,v,speed"
        threads = 1
        rows = 8
        [[quicklook]]
        output = "maps/speed_%Y%m%d.png"
        arrows = true
        width = 2400
        [[section]]
        output = "sections/s_%Y%m%d.nc"
        line = "-30 40, 30 40"
        """

    @classmethod
    def setUpClass(cls):
        super().setUpClass()
        cls._data = tempfile.TemporaryDirectory(prefix="seatilt-e2e-steps-")
        cls.slow = rd.slow_input(os.path.join(cls._data.name, "slow.nc"), steps=2)

    @classmethod
    def tearDownClass(cls):
        cls._data.cleanup()

    def setUp(self):
        super().setUp()
        self.job = rd.write_job(self.path("pelagora.toml"), self.SLOW_JOB)
        os.makedirs(self.path("in"), exist_ok=True)
        for d in self.DAYS3:
            os.symlink(self.slow, os.path.join(self.tmp, "in", d.strftime("ssh_%Y%m%d.nc")))

    def outputs(self, d):
        return (os.path.join(self.tmp, "out", d.strftime("uv_%Y%m%d.nc")),
                os.path.join(self.tmp, "maps", d.strftime("speed_%Y%m%d.png")),
                os.path.join(self.tmp, "sections", d.strftime("s_%Y%m%d.nc")))

    def start(self):
        return subprocess.Popen([BIN, "run", self.job, "--from", self.DAYS3[0].isoformat(), "--to",
                                 self.DAYS3[-1].isoformat()], stdin=subprocess.DEVNULL,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)

    def wait_for(self, proc, condition, what, timeout=60.0):
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if condition():
                return
            if proc.poll() is not None:
                self.fail(f"run ended (exit {proc.returncode}) before {what}: {proc.communicate()!r}")
            time.sleep(0.005)
        proc.kill()
        self.fail(f"timeout waiting for {what}")

    def assert_nothing_torn(self):
        for d in self.DAYS3:
            uv, png, sec = self.outputs(d)
            if os.path.exists(uv):
                self.assertEqual(rd.status(uv), "complete", uv)
            if os.path.exists(png):
                self.assertTrue(whole_png(png), png)
            if os.path.exists(sec):
                self.assertEqual(rd.status(sec), "complete", sec)

    def rerun_completes(self):
        proc = run(["run", self.job, "--from", self.DAYS3[0].isoformat(), "--to",
                    self.DAYS3[-1].isoformat()], timeout=300)
        self.assertEqual(proc.returncode, 0, describe(proc))
        for d in self.DAYS3:
            uv, png, sec = self.outputs(d)
            self.assertEqual(rd.status(uv), "complete")
            self.assertTrue(whole_png(png))
            self.assertEqual(rd.status(sec), "complete")
        self.assertEqual(rd.temporaries(self.tmp), [])
        return proc

    def test_kill_9_while_a_map_is_written(self):
        proc = self.start()
        png_tmp = "." + os.path.basename(self.outputs(self.DAYS3[0])[1]) + ".tmp-"
        maps = os.path.join(self.tmp, "maps")

        def map_in_progress():
            return os.path.isdir(maps) and any(n.startswith(png_tmp) or n.endswith(".png")
                                               for n in os.listdir(maps))
        self.wait_for(proc, map_in_progress, "the first map")
        proc.kill()                           # SIGKILL: no handler runs
        proc.communicate(timeout=60)
        self.assert_nothing_torn()
        left = rd.temporaries(self.tmp)
        rerun = self.rerun_completes()
        for p in left:
            self.assertIn(f"removed {p}", rerun.stderr)
        self.assertIn("2031-09-01 skipped", rerun.stderr)

    def test_sigterm_between_steps(self):
        proc = self.start()
        first_map = self.outputs(self.DAYS3[0])[1]
        self.wait_for(proc, lambda: os.path.exists(first_map), "the first map")
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=60)
        self.assertEqual(proc.returncode, 128 + signal.SIGTERM, err)
        self.assertIn("stopped by SIGTERM", err.splitlines()[-1])
        self.assertEqual(rd.temporaries(self.tmp), [])
        self.assert_nothing_torn()
        self.rerun_completes()


if __name__ == "__main__":
    unittest.main()
