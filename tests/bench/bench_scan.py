#!/usr/bin/python3
"""Benchmark of `strayline scan`, not a test: it prints figures.

It writes folders of 100 and 500 demo-sized plan/structure-set pairs (the
three invented demo cases of examples/, copied round-robin with new UIDs and
patient IDs by pydicom: invented data, not for clinical use), runs
`strayline scan` over each with a fresh output folder and log, and prints
plans per second and the scan's peak resident memory (getrusage of the
child), so that a memory that grows with the number of plans shows as a
difference between the two sizes.

Run: meson test -C build --benchmark -v   (or /usr/bin/python3 tests/bench/bench_scan.py)
Target (issue 15): at least 40 plans per second on a 2-core machine, and
memory flat with the number of plans.
"""
import os
import resource
import subprocess
import sys
import tempfile
import time

import pydicom
from pydicom.uid import generate_uid

ROOT = os.environ.get("SL_SOURCE_ROOT",
                      os.path.abspath(os.path.join(os.path.dirname(__file__), "..", "..")))
BUILD = os.environ.get("SL_BUILD_ROOT", os.path.join(ROOT, "build"))
STRAYLINE = os.environ.get("STRAYLINE", os.path.join(BUILD, "strayline"))
MODEL = os.path.join(ROOT, "models", "demo-e1.yaml")
CASES = ["face-lens", "neck-device", "chest-fetus"]
FACTS = """format: strayline-patient-facts
notice: invented demo facts, not for clinical use
patients:
"""


def make_folder(d, n):
    src = {c: (pydicom.dcmread(os.path.join(ROOT, "examples", c, "rtplan.dcm")),
               pydicom.dcmread(os.path.join(ROOT, "examples", c, "rtstruct.dcm")))
           for c in CASES}
    facts = [FACTS]
    for i in range(n):
        case = CASES[i % len(CASES)]
        plan, ss = src[case]
        pid = "BENCH-%04d" % i
        ss_uid, plan_uid = generate_uid(), generate_uid()
        ss.SOPInstanceUID = ss.file_meta.MediaStorageSOPInstanceUID = ss_uid
        plan.SOPInstanceUID = plan.file_meta.MediaStorageSOPInstanceUID = plan_uid
        ss.PatientID = plan.PatientID = pid
        plan.ReferencedStructureSetSequence[0].ReferencedSOPInstanceUID = ss_uid
        sub = os.path.join(d, "%03d" % (i // 50), pid)
        os.makedirs(sub)
        plan.save_as(os.path.join(sub, "plan.dcm"), write_like_original=True)
        ss.save_as(os.path.join(sub, "structures.dcm"), write_like_original=True)
        if case == "chest-fetus":
            facts.append("  - key: %s\n    gestational_age_weeks: 14\n" % pid)
    with open(os.path.join(d, "..", "facts-%d.yaml" % n), "w") as f:
        f.write("".join(facts))
    return os.path.join(d, "..", "facts-%d.yaml" % n)


def run_scan(folder, out, facts):
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t0 = time.monotonic()
    p = subprocess.run([STRAYLINE, "scan", folder, "--model", MODEL, "--out", out, "--facts",
                        facts, "--quiet"], capture_output=True, text=True)
    dt = time.monotonic() - t0
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    if p.returncode not in (0, 4):
        sys.exit("scan failed (%d): %s" % (p.returncode, p.stderr))
    return dt, peak, before, p.stdout.strip().splitlines()[0]


def main():
    sizes = [int(a) for a in sys.argv[1:]] or [100, 500]
    print("strayline scan benchmark: %d cores online" % os.cpu_count())
    with tempfile.TemporaryDirectory(prefix="strayline-bench-") as tmp:
        for n in sizes:
            d = os.path.join(tmp, "in-%d" % n)
            os.makedirs(d)
            t0 = time.monotonic()
            facts = make_folder(d, n)
            gen = time.monotonic() - t0
            dt, peak, before, line = run_scan(d, os.path.join(tmp, "out-%d" % n), facts)
            # ru_maxrss of RUSAGE_CHILDREN is the largest child so far: a
            # growth shows when the larger folder comes second
            print("%4d pairs (written in %.1f s): %.2f s, %.1f plans/s, peak resident memory "
                  "%.0f MB%s" % (n, gen, dt, n / dt, peak / 1024.0,
                                 "" if peak > before else " (not above the earlier run)"))
            print("      %s" % line)


if __name__ == "__main__":
    main()
