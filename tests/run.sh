#!/bin/sh
# Every test, as CI runs it: install the Debian packages, build twice (plain,
# and with AddressSanitizer + UndefinedBehaviorSanitizer), run the whole suite
# in both builds, and end with one line "N passed, N failed".
set -u
cd "$(dirname "$0")/.." || exit 1
. tests/deps.sh
sl_install $BUILD_PACKAGES $TEST_PACKAGES || exit 1
sl_build build -Dtests=enabled || exit 1
sl_build build-sanitize -Dtests=enabled -Db_sanitize=address,undefined -Db_lundef=false || exit 1

export UBSAN_OPTIONS="halt_on_error=1:print_stacktrace=1"
export ASAN_OPTIONS="detect_leaks=1"
rc=0
meson test -C build --print-errorlogs --num-processes 2 || rc=1
meson test -C build-sanitize --print-errorlogs --num-processes 2 || rc=1
/usr/bin/python3 tests/count.py build/meson-logs/testlog.json \
    build-sanitize/meson-logs/testlog.json || rc=1
exit $rc
