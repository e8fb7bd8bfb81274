#!/usr/bin/python3
"""seatilt climatology --by month|season: month assignment in non-standard
calendars checked against cftime (Debian python3-cftime), and the CF 1.12
section 7.4 climatological time read back by xarray (Debian python3-xarray).
"""

from __future__ import annotations

import os
import sys
import unittest

import numpy as np
import cftime
import netCDF4
import xarray as xr

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import e2e_util as eu  # noqa: E402
import climatology_data as cd  # noqa: E402

SEASON_OF_MONTH = {12: 0, 1: 0, 2: 0, 3: 1, 4: 1, 5: 1, 6: 2, 7: 2, 8: 2, 9: 3, 10: 3, 11: 3}
SEASON_START = [12, 3, 6, 9]   # DJF MAM JJA SON (CF 1.12 Example 7.9)


def month_after(y, m, k):
    idx = (m - 1) + k
    return y + idx // 12, idx % 12 + 1


class CalendarMonths(eu.SeatiltTestCase):

    def run_calendar(self, calendar, start=(2001, 1, 1), days=400, by="month"):
        """One file of DAYS daily maps from START; a_t steps with the month
        number (so means tell months apart). Returns (out, dates, a)."""
        dates = cd.daily_dates(start, days, calendar)
        rng = np.random.default_rng(5)
        a = np.array([d.month for d in dates], dtype=float) * 0.1 + rng.normal(0, 0.01, days)
        b = np.zeros(days)
        # Steps are not in date order inside the file's time axis either way;
        # the file holds them in order, as products do.
        path = cd.write_days(self.path(f"{calendar}.nc"), a, b, dates, calendar=calendar,
                             units="hours since 2000-06-01 06:00", step=1.0, half=1.0)
        out = self.path(f"{calendar}_{by}.nc")
        proc = eu.run(["climatology", path, "-o", out, "--by", by, "--earth", "sphere"])
        self.assertEqual(proc.returncode, 0, eu.describe(proc))
        return out, dates, a

    def check_months(self, calendar):
        out, dates, a = self.run_calendar(calendar)
        months = np.array([d.month for d in dates])   # cftime's month of each step
        lat, _ = cd.grid(1.0, 1.0)
        U, _ = cd.unit_velocity(lat)
        got = eu.read_vars(out, ["count", "u_mean", "period_steps"])
        for m in range(1, 13):
            sel = months == m
            self.assertEqual(int(got["count"][m - 1, 0, 0]), int(sel.sum()), f"{calendar} month {m}")
            self.assertEqual(int(got["period_steps"][m - 1]), int(sel.sum()))
            np.testing.assert_allclose(got["u_mean"][m - 1, 1, 1], a[sel].mean() * U[1], rtol=2e-6)

        # CF 7.4 read back by xarray: the time axis names its climatology
        # bounds; decoded with the file's calendar the bounds of month m run
        # from the first year's m-01 to the month after m in the last year.
        ds = xr.open_dataset(out, use_cftime=True)
        try:
            t = ds["time"]
            clim_name = t.attrs.get("climatology", t.encoding.get("climatology"))
            self.assertEqual(clim_name, "climatology_bounds")
            self.assertNotIn("bounds", t.attrs)
            self.assertEqual(t.encoding["calendar"], calendar)
            cb = ds["climatology_bounds"].values
            self.assertEqual(ds["u_mean"].attrs["cell_methods"],
                             "time: mean within years time: mean over years")
            for m in range(1, 13):
                years = [d.year for d in dates if d.month == m]
                y0, y1 = min(years), max(years)
                ey, em = month_after(y1, m, 1)
                lo, hi = cb[m - 1]
                self.assertEqual((lo.year, lo.month, lo.day), (y0, m, 1), f"{calendar} {m}")
                self.assertEqual((hi.year, hi.month, hi.day), (ey, em, 1), f"{calendar} {m}")
                self.assertEqual(lo.calendar, calendar)
                # The time coordinate lies inside the first year's month.
                tm = t.values[m - 1]
                self.assertEqual((tm.year, tm.month), (y0, m))
        finally:
            ds.close()
        return out

    def test_noleap_months(self):
        self.check_months("noleap")

    def test_360_day_months(self):
        self.check_months("360_day")

    def test_seasons_cross_the_year(self):
        out, dates, _ = self.run_calendar("noleap", start=(2001, 2, 10), days=400, by="season")
        seasons = np.array([SEASON_OF_MONTH[d.month] for d in dates])
        got = eu.read_vars(out, ["count"])
        for s in range(4):
            self.assertEqual(int(got["count"][s, 0, 0]), int((seasons == s).sum()))
        with netCDF4.Dataset(out) as ds:
            t = ds["time"]
            self.assertEqual(t.climatology, "climatology_bounds")
            cb = cftime.num2date(ds["climatology_bounds"][:], t.units, t.calendar)
        # A DJF sample in January or February belongs to the winter that began
        # the December before (CF 7.4: DJF intervals run from December 1 to March 1).
        for s in range(4):
            sy = [d.year - (1 if (s == 0 and d.month < 3) else 0) for d in dates
                  if SEASON_OF_MONTH[d.month] == s]
            y0, y1 = min(sy), max(sy)
            ey, em = month_after(y1, SEASON_START[s], 3)
            lo, hi = cb[s]
            self.assertEqual((lo.year, lo.month, lo.day), (y0, SEASON_START[s], 1))
            self.assertEqual((hi.year, hi.month, hi.day), (ey, em, 1))
        self.assertEqual((cb[0][0].year, cb[0][0].month), (2000, 12))   # Feb 2001 is DJF 2000/01


if __name__ == "__main__":
    unittest.main()
