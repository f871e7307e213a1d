"""Memory checks with valgrind (Debian valgrind): the demo estimate and the
fit of the demo measurements run with --leak-check=full and must show no
memory error and no definite leak. Plain build only: the sanitizer build
checks the same with AddressSanitizer and LeakSanitizer."""
import os
import re
import shutil
import subprocess
import unittest

from common import SOURCE_ROOT, STRAYLINE, tempdir


def valgrind(*args):
    p = subprocess.run(["valgrind", "--leak-check=full", "--errors-for-leak-kinds=definite",
                        "--error-exitcode=99", STRAYLINE] + list(args),
                       capture_output=True, text=True, timeout=1200)
    return p.returncode, p.stderr


@unittest.skipIf(os.environ.get("SL_SANITIZED", "none") != "none",
                 "a sanitizer build: valgrind cannot run it")
@unittest.skipUnless(shutil.which("valgrind"), "valgrind is not installed")
class Valgrind(unittest.TestCase):
    def check(self, rc, log, allowed):
        self.assertIn(rc, allowed, log[-3000:])
        self.assertRegex(log, r"ERROR SUMMARY: 0 errors")
        m = re.search(r"definitely lost: ([\d,]+) bytes", log)
        if m:
            self.assertEqual(m.group(1), "0", log[-3000:])

    def test_demo_estimate(self):
        base = os.path.join(SOURCE_ROOT, "examples", "face-lens")
        with tempdir() as d:
            rc, log = valgrind("estimate", os.path.join(base, "rtplan.dcm"),
                               os.path.join(base, "rtstruct.dcm"), "--model",
                               os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml"),
                               "--prescription-isodose", "90", "--html",
                               os.path.join(d, "r.html"), "--format", "json")
        self.check(rc, log, (0, 4))

    def test_fit_of_the_demo_measurements(self):
        meas = os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1",
                            "measurements.yaml")
        with tempdir() as d:
            rc, log = valgrind("fit", "-q", meas, "-o", os.path.join(d, "m.yaml"), "-r",
                               os.path.join(d, "r.html"))
        self.check(rc, log, (0,))


if __name__ == "__main__":
    unittest.main()
