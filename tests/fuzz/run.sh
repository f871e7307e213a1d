#!/bin/sh
# Fuzz every harness with libFuzzer under AddressSanitizer and
# UndefinedBehaviorSanitizer (clang from Debian, libclang-rt-14-dev).
#   sh tests/fuzz/run.sh [SECONDS_EACH] [HARNESS...]
# New inputs go to tests/fuzz/findings/<name>/ (not committed); crashes to
# tests/fuzz/findings/artifacts/. Keep a crash as a regression case by copying
# it into tests/fuzz/corpus/<name>/ once it is fixed. Runs two at a time.
set -u
cd "$(dirname "$0")/../.." || exit 1
secs=${1:-600}
[ $# -gt 0 ] && shift
names=${*:-"dicom model levels measurements csv geometry"}
if [ ! -f build-fuzz/build.ninja ]; then
    CC=clang CXX=clang++ meson setup build-fuzz -Dfuzz=true -Db_sanitize=address,undefined \
        -Db_lundef=false -Dbuildtype=debugoptimized || exit 1
fi
ninja -C build-fuzz || exit 1
mkdir -p tests/fuzz/findings/artifacts
export UBSAN_OPTIONS="halt_on_error=1:print_stacktrace=1"
export ASAN_OPTIONS="detect_leaks=1"
seeds() {
    case $1 in
    csv) echo tests/data/bad/csv ;;
    levels | geometry) echo ;;
    *) echo tests/data/bad ;;
    esac
}
running=0
for n in $names; do
    mkdir -p "tests/fuzz/findings/$n"
    (./build-fuzz/tests/fuzz_$n -max_total_time="$secs" -timeout=20 -rss_limit_mb=2048 \
        -max_len=65536 -print_final_stats=1 -artifact_prefix=tests/fuzz/findings/artifacts/$n- \
        "tests/fuzz/findings/$n" tests/fuzz/corpus/$n $(seeds $n) \
        > "tests/fuzz/findings/$n.log" 2>&1; echo "$n: exit $?" >> tests/fuzz/findings/summary.txt) &
    running=$((running + 1))
    if [ "$running" -ge 2 ]; then
        wait
        running=0
    fi
done
wait
cat tests/fuzz/findings/summary.txt
