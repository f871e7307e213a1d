#!/bin/sh
# The main job on the shipped demo case: install the Debian packages, build,
# and run strayline on examples/face-lens (invented demo data).
set -u
cd "$(dirname "$0")/.." || exit 1
. tests/deps.sh
sl_install $BUILD_PACKAGES || exit 1
sl_build build || exit 1
./build/strayline inspect examples/face-lens/rtplan.dcm examples/face-lens/rtstruct.dcm
