#!/usr/bin/python3
"""Count test results across meson test logs and print one closing line,
"N passed, N failed". TAP tests count line by line (their "ok" / "not ok"
lines); a test that failed without saying why counts as one failure."""
import json
import sys


def main(paths):
    passed = failed = 0
    for path in paths:
        with open(path) as f:
            for line in f:
                entry = json.loads(line)
                ok_lines = bad_lines = 0
                for out in (entry.get("stdout") or "").splitlines():
                    if out.startswith("ok "):
                        ok_lines += 1
                    elif out.startswith("not ok "):
                        bad_lines += 1
                good = entry.get("result") in ("OK", "EXPECTEDFAIL", "SKIP")
                if ok_lines or bad_lines:
                    passed += ok_lines
                    failed += bad_lines
                    if not good and bad_lines == 0:
                        failed += 1
                elif good:
                    passed += 1
                else:
                    failed += 1
    print("%d passed, %d failed" % (passed, failed))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
