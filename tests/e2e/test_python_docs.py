#!/usr/bin/python3
"""End-to-end: the examples in the documentation run (Python's doctest).

Runs every ">>>" example in README.md and docs/python.md, and the docstrings
of the seatilt package and seatilt.xr, against the built module.
"""

import doctest
import os
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import python_util as pu  # noqa: E402
import e2e_util as eu  # noqa: E402

seatilt = None
FLAGS = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE


def setUpModule():
    global seatilt
    seatilt = pu.import_seatilt()


class Docs(unittest.TestCase):

    def run_file(self, rel, minimum):
        path = os.path.join(eu.REPO, rel)
        old = os.getcwd()
        os.chdir(os.path.dirname(path))
        try:
            result = doctest.testfile(path, module_relative=False, optionflags=FLAGS,
                                      verbose=False, raise_on_error=False)
        finally:
            os.chdir(old)
        self.assertEqual(result.failed, 0, f"{rel}: {result.failed} example(s) failed")
        self.assertGreaterEqual(result.attempted, minimum, rel)

    def test_python_manual(self):
        self.run_file(os.path.join("docs", "python.md"), 5)

    def test_readme(self):
        # The lead merges docs/python.md into README.md; any example there must run too.
        self.run_file("README.md", 0)

    def test_docstrings(self):
        import seatilt.xr
        for module in (seatilt, seatilt.xr):
            with self.subTest(module=module.__name__):
                result = doctest.testmod(module, optionflags=FLAGS, verbose=False)
                self.assertEqual(result.failed, 0, module.__name__)
        self.assertGreater(doctest.testmod(seatilt, optionflags=FLAGS).attempted, 3)


if __name__ == "__main__":
    unittest.main()
