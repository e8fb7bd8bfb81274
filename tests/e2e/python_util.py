"""Helpers for the end-to-end tests of the Python module (tests/e2e/test_python_*.py).

The module is imported from SEATILT_PYTHON_DIR (set by tests/CMakeLists.txt
to <build>/python when it was built); without it every test is skipped.
"""

from __future__ import annotations

import os
import sys
import unittest

import numpy as np
import netCDF4

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import e2e_util as eu  # noqa: E402,F401

PYTHON_DIR = os.environ.get("SEATILT_PYTHON_DIR", "")


def import_seatilt():
    """Return the seatilt package, or raise unittest.SkipTest when it was not built."""
    if not PYTHON_DIR:
        raise unittest.SkipTest("the Python module was not built (SEATILT_PYTHON_DIR unset)")
    if PYTHON_DIR not in sys.path:
        sys.path.insert(0, PYTHON_DIR)
    import seatilt  # noqa: F401
    return seatilt


def read_file_vars(path, names):
    """{name: values as a reader of the file gets them}: float32 with NaN where
    masked (_FillValue), quality as int8 (netCDF4-python, Debian)."""
    out = {}
    with netCDF4.Dataset(path) as ds:
        for name in names:
            v = ds.variables[name]
            a = v[:]
            if v.dtype == np.float32:
                out[name] = np.ma.filled(a, np.float32(np.nan)).astype(np.float32)
            else:
                out[name] = np.ma.getdata(a)
    return out


def assert_bits_equal(test, expected, got, what):
    """EXPECTED and GOT are the same float32 (or integer) values bit for bit, NaN in the same cells."""
    test.assertEqual(expected.shape, got.shape, what)
    test.assertEqual(expected.dtype, got.dtype, what)
    if expected.dtype.kind == "f":
        nan_e, nan_g = np.isnan(expected), np.isnan(got)
        test.assertTrue(np.array_equal(nan_e, nan_g),
                        f"{what}: NaN in different cells ({int((nan_e != nan_g).sum())})")
        same = expected[~nan_e].view(np.uint32) == got[~nan_g].view(np.uint32)
        test.assertTrue(same.all(), f"{what}: {int((~same).sum())} values differ in their bits")
    else:
        test.assertTrue(np.array_equal(expected, got), f"{what}: values differ")


def attrs_equal(a, b):
    """Attribute dicts equal, numpy arrays compared by value and dtype."""
    if set(a) != set(b):
        return False
    for k in a:
        x, y = np.asarray(a[k]), np.asarray(b[k])
        if x.dtype.kind in "US" or y.dtype.kind in "US":
            if str(a[k]) != str(b[k]):
                return False
        elif x.dtype != y.dtype or x.shape != y.shape or not np.array_equal(x, y):
            return False
    return True
