#!/bin/sh
# The build with the test-only packages hidden, on a machine that has them:
# a pkg-config wrapper that answers "not found" for Check (and subunit) and a
# cmake that is never there. The plain build must configure, build the tool
# and run the demo estimate; a build that asks for the tests (-Dtests=enabled)
# must refuse clearly. CI runs this on every stop, so the README's first
# command keeps working on a machine without the test packages.
set -u
cd "$(dirname "$0")/.." || exit 1
. tests/deps.sh
sl_install $BUILD_PACKAGES || exit 1

shim=$(mktemp -d) || exit 1
trap 'rm -rf "$shim"' EXIT
real_pc=$(command -v pkg-config) || { echo "hidden_deps: no pkg-config"; exit 1; }
cat > "$shim/pkg-config" <<SHIM
#!/bin/sh
for a in "\$@"; do
    case "\$a" in check|check\ *|subunit|subunit\ *) exit 1 ;; esac
done
exec "$real_pc" "\$@"
SHIM
printf '#!/bin/sh\necho "cmake: hidden by tests/hidden_deps.sh" >&2\nexit 127\n' > "$shim/cmake"
chmod +x "$shim/pkg-config" "$shim/cmake"
export PATH="$shim:$PATH"

dir=build-nodeps
rm -rf "$dir" "$dir-enabled"
log=$(mktemp) || exit 1
if ! meson setup "$dir" > "$log" 2>&1; then
    cat "$log"; echo "hidden_deps: FAIL: the plain build does not configure without Check"; exit 1
fi
grep -q "Check not found: the test suite is not built" "$log" ||
    { cat "$log"; echo "hidden_deps: FAIL: no message that the tests are skipped"; exit 1; }
ninja -C "$dir" strayline > "$log" 2>&1 ||
    { cat "$log"; echo "hidden_deps: FAIL: the tool does not build without Check"; exit 1; }
./"$dir"/strayline estimate examples/face-lens/rtplan.dcm examples/face-lens/rtstruct.dcm \
    --model models/demo-e1.yaml --html "$dir/face-lens-report.html" > /dev/null
rc=$?
if [ "$rc" -ne 0 ] && [ "$rc" -ne 4 ] || [ ! -s "$dir/face-lens-report.html" ]; then
    echo "hidden_deps: FAIL: the demo estimate from $dir (exit $rc)"; exit 1
fi
if meson setup "$dir-enabled" -Dtests=enabled > "$log" 2>&1; then
    echo "hidden_deps: FAIL: -Dtests=enabled configured without Check"; exit 1
fi
grep -q 'Dependency "check" not found' "$log" ||
    { cat "$log"; echo "hidden_deps: FAIL: -Dtests=enabled failed for another reason"; exit 1; }
rm -rf "$dir" "$dir-enabled" "$log"
echo "hidden_deps: ok: without Check the tool builds and runs the demo; -Dtests=enabled refuses"
