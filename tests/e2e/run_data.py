"""Inputs and job files for the `seatilt run` end-to-end tests (test_run_*.py).

Inputs come from the project's generator scripts/make_ssh.py (imported
through e2e_util); the scenarios are invented.
"""

from __future__ import annotations

import datetime as _dt
import glob
import os
import textwrap

import netCDF4
import numpy as np

from e2e_util import make_ssh


def small_input(path: str, day: _dt.date) -> str:
    """A small regional analytic eddy (81 x 101 cells, one step at noon of DAY)."""
    fld = make_ssh.eddy_field(times=[_dt.datetime(day.year, day.month, day.day, 12)])
    os.makedirs(os.path.dirname(path), exist_ok=True)
    return make_ssh.write_ssh(path, fld)


def slow_input(path: str, steps: int = 8) -> str:
    """A global half-degree zonal wave repeated over STEPS daily steps
    (360 x 720 cells per step): slow enough to catch a run in the middle of a
    file when processed in bands of 8 rows with one thread."""
    fld = make_ssh.wave_field(step=0.5, with_poles=False)
    eta = np.repeat(fld.eta, steps, axis=0)
    many = make_ssh.SshField(fld.lat, fld.lon, eta,
                             make_ssh.daily_times(_dt.datetime(2031, 9, 1), steps), kind="anomaly")
    os.makedirs(os.path.dirname(path), exist_ok=True)
    return make_ssh.write_ssh(path, many)


def write_job(path: str, text: str) -> str:
    """Write a job file (TEXT dedented) and return PATH."""
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w") as f:
        f.write(textwrap.dedent(text).lstrip("\n"))
    return path


def days(first: _dt.date, n: int):
    """N consecutive dates from FIRST."""
    return [first + _dt.timedelta(days=k) for k in range(n)]


def status(path: str):
    """The global seatilt_status of PATH, or None (absent file, no attribute,
    or not readable as netCDF)."""
    if not os.path.exists(path):
        return None
    try:
        with netCDF4.Dataset(path) as ds:
            return getattr(ds, "seatilt_status", None)
    except OSError:
        return None


def temporaries(folder: str):
    """Temporary outputs (".<name>.tmp-<pid>-<hex>") in FOLDER and below."""
    return sorted(glob.glob(os.path.join(folder, "**", ".*.tmp-*"), recursive=True))


def dead_pid() -> int:
    """A process id that no longer runs (a child that has exited and been reaped)."""
    pid = os.fork()
    if pid == 0:
        os._exit(0)
    os.waitpid(pid, 0)
    return pid
