#!/usr/bin/python3
"""Run one unittest module and report each test as a TAP line, so that meson
(protocol 'tap') and .ci/run count the reference tests one by one.

Usage: /usr/bin/python3 tests/reference/tap.py tests/reference/test_X.py
"""
import importlib.util
import os
import sys
import traceback
import unittest


class TapResult(unittest.TestResult):
    def __init__(self):
        super().__init__()
        self.n = 0

    def _line(self, ok, test, note=""):
        self.n += 1
        name = test.id().split(".", 1)[-1]
        print("%s %d - %s%s" % ("ok" if ok else "not ok", self.n, name, note), flush=True)

    def addSuccess(self, test):
        self._line(True, test)

    def addFailure(self, test, err):
        super().addFailure(test, err)
        self._line(False, test)
        self._diag(err)

    def addError(self, test, err):
        super().addError(test, err)
        self._line(False, test)
        self._diag(err)

    def addSkip(self, test, reason):
        self._line(True, test, " # SKIP %s" % reason)

    def addSubTest(self, test, subtest, err):
        if err is not None:
            super().addSubTest(test, subtest, err)
            self._line(False, subtest)
            self._diag(err)

    @staticmethod
    def _diag(err):
        for line in "".join(traceback.format_exception(*err)).splitlines():
            print("# " + line, flush=True)


def main():
    path = sys.argv[1]
    sys.path.insert(0, os.path.dirname(os.path.abspath(path)))
    spec = importlib.util.spec_from_file_location(os.path.basename(path)[:-3], path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    suite = unittest.defaultTestLoader.loadTestsFromModule(mod)
    result = TapResult()
    suite.run(result)
    print("1..%d" % result.n)
    return 0 if result.wasSuccessful() else 1


if __name__ == "__main__":
    sys.exit(main())
