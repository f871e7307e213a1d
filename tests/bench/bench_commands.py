#!/usr/bin/python3
"""Benchmark of the commands on a large structure set file, not a test: it
prints figures.

It writes the large invented case of make_large_case.py (40 ROIs, 200 slices,
about 0.85 million contour points in a 17 MB RT Structure Set, three electron
beams with 200-vertex cutouts) once into a cache folder, then runs
`strayline inspect`, `locate` and `estimate` on it several times each and
prints, per command, the best wall-clock time, the CPU time (user + system)
of that run and the peak resident memory (getrusage of the child, in MB).

Then it runs each command once more after the machine has been idle for
SL_BENCH_IDLE seconds (3 by default), as a user runs it: on a virtual
machine that hands memory freed for about two seconds back to its host,
every page such a run touches costs the kernel much more than in a run
right after another (DEVELOPERS.md, Benchmarks), and the best of several
runs in a row does not show it.

Run: meson test -C build --benchmark -v   (or /usr/bin/python3 tests/bench/bench_commands.py)
Targets on a 2-core machine: locate at most 0.3 s and 256 MB, estimate at
most 0.5 s. The machine's load shows in the wall time, not much in the CPU
time: read both.
"""
import os
import subprocess
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.abspath(os.path.join(HERE, "..", ".."))
BUILD = os.environ.get("SL_BUILD_ROOT", os.path.join(ROOT, "build"))
STRAYLINE = os.environ.get("STRAYLINE", os.path.join(BUILD, "strayline"))
CACHE = os.environ.get("SL_BENCH_CASE", os.path.join(BUILD, "bench-case"))
MODEL = os.path.join(ROOT, "models", "demo-e1.yaml")
RUNS = int(os.environ.get("SL_BENCH_RUNS", "3"))
IDLE = float(os.environ.get("SL_BENCH_IDLE", "3"))


def run_once(args):
    t0 = time.monotonic()
    p = subprocess.Popen([STRAYLINE] + args, stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.monotonic() - t0
    err = p.stderr.read().decode(errors="replace")
    p.stderr.close()
    rc = os.waitstatus_to_exitcode(status)
    return wall, ru.ru_utime + ru.ru_stime, ru.ru_maxrss / 1024, rc, err


def main():
    plan, ss = os.path.join(CACHE, "rtplan.dcm"), os.path.join(CACHE, "rtstruct.dcm")
    if not (os.path.exists(plan) and os.path.exists(ss)):
        subprocess.run(["/usr/bin/python3", os.path.join(HERE, "make_large_case.py"), CACHE],
                       check=True)
    print("case: %s (%.1f MB)" % (ss, os.path.getsize(ss) / 1e6))
    commands = [("inspect", ["inspect", ss]),
                ("locate", ["locate", plan, ss]),
                ("estimate", ["estimate", plan, ss, "--model", MODEL])]
    for name, args in commands:
        best = None
        for _ in range(RUNS):
            wall, cpu, rss, rc, err = run_once(args)
            if rc not in (0, 4):
                print("%s failed (exit %d): %s" % (name, rc, err.strip()))
                return 1
            if best is None or wall < best[0]:
                best = (wall, cpu, rss)
        print("%-8s %.3f s wall (best of %d), %.3f s CPU, peak %.0f MB" % (name, *best[:1], RUNS,
                                                                          *best[1:]))
        if IDLE > 0:
            time.sleep(IDLE)
            wall, cpu, rss, rc, err = run_once(args)
            if rc not in (0, 4):
                print("%s failed (exit %d): %s" % (name, rc, err.strip()))
                return 1
            print("%-8s %.3f s wall (one run after %g s idle), %.3f s CPU, peak %.0f MB"
                  % (name, wall, IDLE, cpu, rss))
    return 0


if __name__ == "__main__":
    sys.exit(main())
