"""Shared helpers of the reference tests: where things are, and running the
strayline tool as a user would (a subprocess, exit code, stdout, stderr)."""
import json
import os
import subprocess
import sys
import tempfile

SOURCE_ROOT = os.environ.get("SL_SOURCE_ROOT",
                             os.path.abspath(os.path.join(os.path.dirname(__file__), "..", "..")))
BUILD_ROOT = os.environ.get("SL_BUILD_ROOT", os.path.join(SOURCE_ROOT, "build"))
STRAYLINE = os.environ.get("STRAYLINE", os.path.join(BUILD_ROOT, "strayline"))
PYDICOM_TEST_FILES = "/usr/lib/python3/dist-packages/pydicom/data/test_files"

sys.path.insert(0, os.path.join(SOURCE_ROOT, "examples", "generator"))


def run(*args, check=None):
    """Run strayline; return (exit code, stdout, stderr)."""
    p = subprocess.run([STRAYLINE] + [str(a) for a in args], capture_output=True, text=True,
                       timeout=300)
    if check is not None and p.returncode != check:
        raise AssertionError("strayline %s exited %d (expected %d)\nstdout:\n%s\nstderr:\n%s"
                             % (" ".join(map(str, args)), p.returncode, check, p.stdout, p.stderr))
    return p.returncode, p.stdout, p.stderr


def run_json(*args, check=0):
    rc, out, err = run(*args, check=check)
    return json.loads(out)


def tempdir():
    return tempfile.TemporaryDirectory(prefix="strayline-test-")
