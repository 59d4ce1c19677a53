#!/usr/bin/env bash
# Builds the local tf2_msgs interface package (tools/tf_msgs) into .ros_ws/ with colcon, using only the venv.
#
# Why: the TF message interface is not published as a wheel, but wheel_dr publishes /tf and its
# tests exchange tf2_msgs/TFMessage over real DDS. This script
#   1. installs the build-only wheels pinned in requirements-ros-build.txt into the venv
#      (skipped when a stamp in the venv says they are already there),
#   2. rewrites two include folders that the message wheels' CMake files name from the machine
#      the wheels were built on, to this venv's Python include folder and numpy's include folder
#      (only inside the venv's own share/**/*.cmake files; idempotent),
#   3. builds tools/tf_msgs with colcon into .ros_ws/{build,install,log}
#      (skipped when .ros_ws/tf_msgs.stamp matches the inputs).
# Runtime use: `. tools/ros_env.sh` or wheel_dr.ros.env.ros_environment().
# Environment: WHEEL_DR_VENV (default <repo>/.venv), WHEEL_DR_ROS_WS (default <repo>/.ros_ws).
set -euo pipefail

ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
VENV="${WHEEL_DR_VENV:-$ROOT/.venv}"
WS="${WHEEL_DR_ROS_WS:-$ROOT/.ros_ws}"
PY="$VENV/bin/python"
PKG_SRC="$ROOT/tools/tf_msgs"
REQ="$ROOT/requirements-ros-build.txt"

die() { echo "build_tf_msgs: $*" >&2; exit 1; }

[ -x "$PY" ] || die "no Python at $PY; run 'make venv' first (or set WHEEL_DR_VENV)."
command -v cmake >/dev/null || die "cmake is not installed; install cmake 3.25 or newer."
command -v c++ >/dev/null || die "no C++ compiler (c++) found; install g++."
command -v flock >/dev/null || die "flock is not installed; install util-linux."

mkdir -p "$WS"
# Several engineers (and CI) may run this at once in the same tree: one at a time.
exec 9>"$WS/.build.lock"
flock 9

# --- 1. build-only wheels -------------------------------------------------------------------
pip_stamp="$VENV/.ros_build_installed"
req_hash="$(sha256sum "$REQ" | cut -d' ' -f1)"
if [ "$(cat "$pip_stamp" 2>/dev/null || true)" != "$req_hash" ]; then
    echo "build_tf_msgs: installing build-only wheels from requirements-ros-build.txt"
    # -c keeps everything already pinned in requirements.txt at its pin.
    "$PY" -m pip install --quiet --disable-pip-version-check -r "$REQ" -c "$ROOT/requirements.txt" \
        2> >(grep -v "is ignored: it is neither a file nor a directory" >&2)
    echo "$req_hash" > "$pip_stamp"
fi

# --- 2. include-folder rewrite inside the venv ----------------------------------------------
"$PY" - "$VENV" <<'PYEOF'
"""Point the message wheels' CMake include folders at this venv (idempotent)."""
import os
import pathlib
import sys
import sysconfig

import numpy

venv = pathlib.Path(sys.argv[1])
python_include = sysconfig.get_paths()["include"]
if not pathlib.Path(python_include, "Python.h").is_file():
    sys.exit(f"build_tf_msgs: Python headers are missing at {python_include}; install the Python 3.11 development headers.")
rewrites = {
    # longer, more specific path first
    "/opt/python/cp311-cp311/lib/python3.11/site-packages/numpy/_core/include": numpy.get_include(),
    "/opt/python/cp311-cp311/include/python3.11": python_include,
}
changed = 0
for path in (venv / "share").rglob("*.cmake"):
    text = path.read_text(encoding="utf-8", errors="surrogateescape")
    if "/opt/python/cp311-cp311/" not in text:
        continue
    new_text = text
    for old, new in rewrites.items():
        new_text = new_text.replace(old, new)
    if new_text != text:
        tmp = path.with_name(path.name + ".tmp-rewrite")
        tmp.write_text(new_text, encoding="utf-8", errors="surrogateescape")
        os.replace(tmp, path)
        changed += 1
if changed:
    print(f"build_tf_msgs: rewrote include folders in {changed} CMake file(s) under {venv / 'share'}")
PYEOF

# --- 3. colcon build --------------------------------------------------------------------------
stamp="$WS/tf_msgs.stamp"
inputs_hash="$(
    {
        (cd "$PKG_SRC" && find . -type f -print0 | sort -z | xargs -0 sha256sum)
        (cd "$ROOT" && sha256sum requirements-ros-build.txt requirements.txt tools/build_tf_msgs.sh)
        readlink -f "$VENV"
        "$PY" -c 'import sys; print(sys.version)'
    } | sha256sum | cut -d' ' -f1
)"
marker="$WS/install/lib/python3.11/site-packages/tf2_msgs/msg/_tf_message.py"
if [ "$(cat "$stamp" 2>/dev/null || true)" = "$inputs_hash" ] && [ -f "$marker" ] \
    && compgen -G "$WS/install/lib/libtf2_msgs__rosidl_typesupport_fastrtps_c.so" >/dev/null; then
    echo "build_tf_msgs: tf2_msgs is up to date in $WS/install"
    exit 0
fi

echo "build_tf_msgs: building tf2_msgs into $WS/install"
rm -rf "$WS/build" "$WS/install" "$WS/log" "$stamp"
start_s=$(date +%s.%N)
log_file="$WS/build_tf_msgs.log"
# Only the venv: its bin first, its prefix as the only CMake/ament prefix, nothing stale on PYTHONPATH.
# RUNPATH $ORIGIN (libraries) and $ORIGIN/../../.. (Python extensions in lib/python3.11/site-packages/
# tf2_msgs) lets the built parts find each other without LD_LIBRARY_PATH.
if ! (
    cd "$WS"
    env -u PYTHONPATH -u COLCON_PREFIX_PATH \
        PATH="$VENV/bin:$PATH" \
        CMAKE_PREFIX_PATH="$VENV" \
        AMENT_PREFIX_PATH="$VENV" \
        COLCON_HOME="$WS/.colcon_home" \
        "$VENV/bin/colcon" --log-base "$WS/log" build \
            --base-paths "$PKG_SRC" \
            --build-base "$WS/build" \
            --install-base "$WS/install" \
            --merge-install \
            --event-handlers console_direct- console_stderr- \
            --cmake-args \
                "-DPython3_EXECUTABLE=$PY" \
                -DBUILD_TESTING=OFF \
                -DCMAKE_BUILD_TYPE=Release \
                '-DCMAKE_INSTALL_RPATH=$ORIGIN;$ORIGIN/../../..'
) >"$log_file" 2>&1; then
    tail -n 40 "$log_file" >&2
    die "colcon could not build tools/tf_msgs; the full log is $log_file."
fi
[ -f "$marker" ] || die "colcon finished but $marker is missing; see $log_file."
echo "$inputs_hash" > "$stamp"
end_s=$(date +%s.%N)
awk -v a="$start_s" -v b="$end_s" 'BEGIN { printf "build_tf_msgs: built tf2_msgs in %.1f s\n", b - a }'
