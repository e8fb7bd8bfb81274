#!/usr/bin/python3
"""`seatilt run JOB.toml`: templates, date ranges, skip/redo, failures, logs,
job-file errors (exit codes and messages as in docs/run.md)."""

from __future__ import annotations

import datetime as dt
import glob
import json
import os
import shutil
import unittest

from e2e_util import REPO, SeatiltTestCase, describe, run, stderr_lines
import run_data as rd


class TemplatesAndDates(SeatiltTestCase):
    """Dry runs: the plan names one input and one output per day."""

    def plan(self, job, *args, expect=0):
        proc = run(["run", job, "--dry-run", *args])
        self.assertEqual(proc.returncode, expect, describe(proc))
        return [ln.split() for ln in proc.stdout.splitlines() if ln.strip()]

    def test_range_over_a_leap_day(self):
        job = rd.write_job(self.path("jobs", "pelagora.toml"), """
            input = "../in/%Y/%j/ssh_%Y%m%d.nc"
            output = "out/%Y/%m/uv_%Y%m%d_%j_%a.nc"
            """)
        rows = self.plan(job, "--from", "2032-02-27", "--to", "2032-03-02")
        first = dt.date(2032, 2, 27)
        self.assertEqual(len(rows), 5)
        for k, row in enumerate(rows):
            d = first + dt.timedelta(days=k)
            # Reference: Python's datetime.strftime for the same fields.
            want_in = os.path.join(self.tmp, d.strftime("in/%Y/%j/ssh_%Y%m%d.nc"))
            want_out = os.path.join(self.tmp, "jobs", d.strftime("out/%Y/%m/uv_%Y%m%d_%j_%a.nc"))
            self.assertEqual(row, [d.isoformat(), "missing", want_in, "->", want_out])
        # 2032 is a Gregorian leap year: 29 February is day 060, 1 March day 061;
        # 2032-02-29 is a Sunday (Python datetime).
        self.assertTrue(rows[2][4].endswith("/uv_20320229_060_Sun.nc"), rows[2])
        self.assertTrue(rows[3][4].endswith("/uv_20320301_061_Mon.nc"), rows[3])
        # A dry run writes nothing: no output folder, no lock file.
        self.assertFalse(os.path.exists(self.path("jobs", "out")))
        self.assertFalse(os.path.exists(job + ".lock"))

    def test_catch_up_and_lag(self):
        job = rd.write_job(self.path("catchup.toml"), """
            input = "in/ssh_%F.nc"
            output = "out/uv_%F.nc"
            [dates]
            catch_up_days = 3
            lag_days = 1
            """)
        # The window ends at --date (no lag) and crosses the year.
        self.assertEqual([r[0] for r in self.plan(job, "--date", "2032-01-01")],
                         ["2031-12-30", "2031-12-31", "2032-01-01"])
        self.assertEqual([r[0] for r in self.plan(job, "--date", "2032-01-01", "--catch-up", "1")],
                         ["2032-01-01"])
        # Without --date: the 3 days ending yesterday (UTC).
        before = dt.datetime.now(dt.timezone.utc).date()
        got = [r[0] for r in self.plan(job)]
        after = dt.datetime.now(dt.timezone.utc).date()
        self.assertIn(got, [[(t - dt.timedelta(days=k)).isoformat() for k in (3, 2, 1)]
                            for t in {before, after}])

    def test_range_in_the_job_file_and_overrides(self):
        job = rd.write_job(self.path("reprocess.toml"), """
            input = "in/ssh_%Y%m%d.nc"
            output = "out/uv_%Y%m%d.nc"
            [dates]
            from = 2031-10-30
            to = "2031-11-02"
            """)
        self.assertEqual([r[0] for r in self.plan(job)],
                         ["2031-10-30", "2031-10-31", "2031-11-01", "2031-11-02"])
        self.assertEqual([r[0] for r in self.plan(job, "--date", "2031-05-05")], ["2031-05-05"])

    def test_example_job_files_are_valid(self):
        examples = sorted(glob.glob(os.path.join(REPO, "config", "*.toml")))
        self.assertGreaterEqual(len(examples), 3)
        for job in examples:
            with self.subTest(job=os.path.basename(job)):
                rows = self.plan(job, "--date", "2031-09-03", "--catch-up", "2")
                self.assertEqual([r[0] for r in rows], ["2031-09-02", "2031-09-03"])
                for r in rows:
                    self.assertIn("20310902" if r[0] == "2031-09-02" else "20310903", r[4])

    def test_bad_command_line_dates(self):
        job = rd.write_job(self.path("j.toml"), 'input = "a_%F.nc"\noutput = "b_%F.nc"\n')
        for args, mention in [(["--date", "2031-02-30"], "--date: '2031-02-30' is not a date"),
                              (["--to", "2031-02-03"], "--to: needs --from"),
                              (["--from", "2031-02-03", "--to", "2031-02-01"], "is after the end"),
                              (["--date", "2031-02-03", "--from", "2031-02-01"], "either --date"),
                              (["--catch-up", "0"], "--catch-up: 0 is outside 1..36600")]:
            proc = run(["run", job, "--dry-run", *args])
            self.assertEqual(proc.returncode, 2, describe(proc))
            self.assert_one_error_line(proc, mention)


class SkipRedoAndFailures(SeatiltTestCase):
    FIRST = dt.date(2031, 9, 1)

    def setUp(self):
        super().setUp()
        self.job = rd.write_job(self.path("tessaline.toml"), """
            name = "tessaline-daily"
            input = "in/ssh_%Y%m%d.nc"
            output = "out/%Y/uv_%Y%m%d.nc"
            [currents]
            order = 4
            fields = ["u", "v", "speed"]
            threads = 1
            """)

    def inp(self, d):
        return os.path.join(self.tmp, "in", d.strftime("ssh_%Y%m%d.nc"))

    def out(self, d):
        return os.path.join(self.tmp, "out", d.strftime("%Y/uv_%Y%m%d.nc"))

    def run_job(self, *args, expect=0):
        proc = run(["run", self.job, "--from", "2031-09-01", "--to", "2031-09-03", *args])
        self.assertEqual(proc.returncode, expect, describe(proc))
        return proc

    def test_skip_complete_redo_incomplete_force_all(self):
        ds = rd.days(self.FIRST, 3)
        for d in ds:
            rd.small_input(self.inp(d), d)
        proc = self.run_job()
        lines = stderr_lines(proc)
        self.assertEqual(len(lines), 4, describe(proc))  # one per file + summary
        for d, ln in zip(ds, lines):
            self.assertIn(f"{d.isoformat()} done: {self.out(d)}", ln)
        self.assertIn("3 done", lines[-1])
        for d in ds:
            self.assertEqual(rd.status(self.out(d)), "complete")
        with rd.netCDF4.Dataset(self.out(ds[0])) as nc:
            self.assertEqual(sorted(v for v in nc.variables if v in ("u", "v", "speed", "quality",
                                                                    "vorticity")),
                             ["quality", "speed", "u", "v"])
            self.assertEqual(int(nc.geostrophy_stencil_order), 4)
        first_mtime = os.stat(self.out(ds[0])).st_mtime_ns

        # Day 2: a netCDF file without the marker; day 3: a torn copy.
        shutil.copy(self.inp(ds[1]), self.out(ds[1]))
        with open(self.out(ds[2]), "r+b") as f:
            f.truncate(os.path.getsize(self.out(ds[2])) // 2)
        self.assertIsNone(rd.status(self.out(ds[2])))
        proc = self.run_job()
        lines = stderr_lines(proc)
        self.assertIn("2031-09-01 skipped", lines[0])
        self.assertIn("2031-09-02 redone (was incomplete)", lines[1])
        self.assertIn("2031-09-03 redone (was incomplete)", lines[2])
        for d in ds:
            self.assertEqual(rd.status(self.out(d)), "complete")
        self.assertEqual(os.stat(self.out(ds[0])).st_mtime_ns, first_mtime)

        proc = self.run_job("--force")
        self.assertIn("3 redone", stderr_lines(proc)[-1])
        self.assertNotEqual(os.stat(self.out(ds[0])).st_mtime_ns, first_mtime)
        self.assertEqual(rd.temporaries(self.tmp), [])

        # All complete and --quiet: nothing at all on stderr (cron mails nothing).
        proc = self.run_job("--quiet")
        self.assertEqual(proc.stderr, "", describe(proc))

    def test_corrupt_and_missing_inputs_among_good_ones(self):
        ds = rd.days(self.FIRST, 3)
        rd.small_input(self.inp(ds[0]), ds[0])
        with open(self.inp(ds[1]), "wb") as f:  # corrupt: HDF5 signature, then garbage
            f.write(b"\x89HDF\r\n\x1a\n" + os.urandom(3000))
        rd.small_input(self.inp(ds[2]), ds[2])
        log = self.path("logs", "run.jsonl")
        proc = self.run_job("--log-json", log, expect=5)
        self.assertEqual(rd.status(self.out(ds[0])), "complete")
        self.assertEqual(rd.status(self.out(ds[2])), "complete")
        self.assertFalse(os.path.exists(self.out(ds[1])))
        errors = [ln for ln in stderr_lines(proc) if ln.startswith("seatilt: error: ")]
        self.assertEqual(len(errors), 1, describe(proc))
        self.assertIn(self.inp(ds[1]), errors[0])
        self.assertIn("(date 2031-09-02)", errors[0])
        self.assertIn("1 failed (input)", stderr_lines(proc)[-1])

        with open(log) as f:
            entries = [json.loads(ln) for ln in f]
        self.assertEqual([e["status"] for e in entries], ["done", "failed", "done"])
        for e in entries:
            self.assertEqual(set(e), {"time", "job", "date", "input", "output", "status",
                                      "seconds", "steps", "cells", "flagged_share", "message"})
            self.assertEqual(e["job"], "tessaline-daily")
        self.assertEqual(entries[0]["cells"], 81 * 101)  # eddy_field: 81 x 101 cells, one step
        self.assertGreater(entries[0]["flagged_share"], 0.0)  # domain edges are flagged one-sided
        self.assertLess(entries[0]["flagged_share"], 1.0)
        self.assertIsNone(entries[1]["cells"])
        self.assertIn(self.inp(ds[1]), entries[1]["message"])

        # Missing input (default missing_input = "fail"): exit 5 too.
        os.remove(self.inp(ds[1]))
        proc = self.run_job("--quiet", expect=5)
        self.assertIn("input file does not exist (date 2031-09-02)", proc.stderr)
        # missing_input = "skip": reported, not a failure.
        with open(self.job) as f:
            text = f.read().replace('name = "tessaline-daily"',
                                    'name = "tessaline-daily"\nmissing_input = "skip"')
        rd.write_job(self.job, text)
        proc = self.run_job()
        self.assertIn(f"2031-09-02 no input: {self.inp(ds[1])} does not exist", proc.stderr)
        proc = self.run_job("--quiet")
        self.assertEqual(proc.stderr, "")

    def test_stale_temporary_of_a_dead_run_is_removed(self):
        d = self.FIRST
        rd.small_input(self.inp(d), d)
        os.makedirs(os.path.dirname(self.out(d)))
        stale = os.path.join(os.path.dirname(self.out(d)),
                             f".{os.path.basename(self.out(d))}.tmp-{rd.dead_pid()}-00c0ffee")
        alive = os.path.join(os.path.dirname(self.out(d)),
                             f".{os.path.basename(self.out(d))}.tmp-{os.getpid()}-00c0ffee")
        for p in (stale, alive):
            open(p, "w").close()
        proc = run(["run", self.job, "--date", "2031-09-01"])
        self.assertEqual(proc.returncode, 0, describe(proc))
        self.assertIn(f"removed {stale}", proc.stderr)
        self.assertFalse(os.path.exists(stale))
        self.assertTrue(os.path.exists(alive))  # this test process still runs
        self.assertEqual(rd.status(self.out(d)), "complete")

    def test_output_folder_is_not_writable(self):
        # A path under /proc cannot be created even by root: exit 4, one line.
        rd.small_input(self.inp(self.FIRST), self.FIRST)
        job = rd.write_job(self.path("proc.toml"), f"""
            input = "{self.tmp}/in/ssh_%Y%m%d.nc"
            output = "/proc/seatilt-e2e-nowhere/uv_%Y%m%d.nc"
            """)
        proc = run(["run", job, "--date", "2031-09-01", "--quiet"])
        self.assertEqual(proc.returncode, 4, describe(proc))
        self.assertIn("cannot create output folder", proc.stderr)
        self.assertIn("failed (output not written)", proc.stderr)


class JobFileErrors(SeatiltTestCase):
    """Job-file problems: exit 2, one line "JOB:LINE: problem", nothing written
    (every message is checked in tests/test_jobs.cpp)."""

    GOOD = 'input = "in/ssh_%Y%m%d.nc"\noutput = "out/uv_%Y%m%d.nc"\n'
    CASES = [
        (GOOD + "[currents]\nordr = 4\n", 4, "unknown key 'ordr' in [currents] (did you mean 'order'?)"),
        (GOOD + "[currents]\norder = 5\n", 4, "currents.order: 5 is not one of 2, 4, 6"),
        (GOOD + "[currents]\nfields = [\"u\", \"curl\"]\n", 4, "currents.fields: unknown field 'curl'"),
        (GOOD + "[currents]\nthreads = \"two\"\n", 4, "currents.threads: expected an integer, got a string"),
        ('input = "in/ssh_%Y%m%d.nc"\n\noutput = "out/uv_%Y%m%k.nc"\n', 3,
         "output: template 'out/uv_%Y%m%k.nc': unknown date field %k at character 12"),
        ('input = "in/ssh_%Y%m%d.nc"\noutput = "out/uv.nc"\n', 2, "output: template 'out/uv.nc' has no date field"),
        (GOOD + "[dates]\nfrom = 2031-09-10\nto = 2031-09-01\n", 5, "dates.to: 2031-09-01 is before dates.from"),
        (GOOD + "[currents\norder = 4\n", 3, ""),  # TOML syntax: toml++'s own description
        (GOOD + "maps = true\n", 3, "unknown key 'maps'"),
    ]

    def test_errors_name_file_and_line(self):
        for k, (text, line, mention) in enumerate(self.CASES):
            with self.subTest(case=k, mention=mention):
                job = rd.write_job(self.path(f"case{k}", "job.toml"), text)
                proc = run(["run", job, "--date", "2031-09-01"])
                self.assertEqual(proc.returncode, 2, describe(proc))
                err = self.assert_one_error_line(proc, f"{job}:{line}: {mention}")
                self.assertTrue(err.startswith(f"seatilt: error: {job}:{line}: "), err)
                self.assertEqual(os.listdir(os.path.dirname(job)), ["job.toml"])

    def test_missing_job_file_and_duplicate_outputs(self):
        proc = run(["run", self.path("absent.toml")])
        self.assertEqual(proc.returncode, 2, describe(proc))
        self.assert_one_error_line(proc, "absent.toml: cannot read job file")
        job = rd.write_job(self.path("dup.toml"), 'input = "in_%F.nc"\noutput = "out/uv_%d.nc"\n')
        proc = run(["run", job, "--from", "2031-09-30", "--to", "2031-10-01", "--dry-run"])
        self.assertEqual(proc.returncode, 0, describe(proc))
        proc = run(["run", job, "--from", "2031-09-01", "--to", "2031-10-01", "--dry-run"])
        self.assertEqual(proc.returncode, 2, describe(proc))
        self.assert_one_error_line(proc, f"{job}:2: output: template")
        self.assertIn("gives one file for 2031-09-01 and 2031-10-01", proc.stderr)


if __name__ == "__main__":
    unittest.main()
