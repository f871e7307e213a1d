# Debian 12 packages strayline needs, sourced by examples/demo.sh and
# tests/run.sh (one list, two users). sl_install skips apt-get when every
# package is already installed, so both commands are cheap to run again.

BUILD_PACKAGES="meson ninja-build pkg-config gcc g++ libdcmtk-dev libgsl-dev libyaml-dev
  libjson-c-dev nettle-dev libxml2-dev libcsv-dev zlib1g-dev libcairo2-dev libpango1.0-dev
  libfontconfig-dev fonts-dejavu-core libtiff-dev libsqlite3-dev"
TEST_PACKAGES="check libsubunit-dev python3-pydicom python3-numpy python3-scipy
  python3-shapely python3-jsonschema python3-yaml dicom3tools dcmtk valgrind poppler-utils
  python3-tifffile"

sl_install() {
    missing=""
    for p in "$@"; do
        dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" ||
            missing="$missing $p"
    done
    [ -z "$missing" ] && return 0
    echo "installing Debian packages:$missing"
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -q && apt-get install -y -q --no-install-recommends $missing
}

# sl_build DIR [MESON OPTIONS]: configure DIR once (reconfigure later) and build it.
sl_build() {
    dir=$1
    shift
    if [ -f "$dir/build.ninja" ]; then
        meson setup --reconfigure "$dir" "$@" >/dev/null || return 1
    else
        meson setup "$dir" "$@" || return 1
    fi
    ninja -C "$dir"
}
