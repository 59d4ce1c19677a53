# Source me (bash, zsh or POSIX sh): puts the locally built tf2_msgs (.ros_ws/install, built by
# tools/build_tf_msgs.sh) and the venv on the ROS paths, the same way as
# wheel_dr.ros.env.ros_environment(). Does not change the DDS domain or discovery settings.
#   . tools/ros_env.sh            (bash/zsh find the repo from this file's location)
#   WHEEL_DR_ROOT=/path/to/repo; . "$WHEEL_DR_ROOT/tools/ros_env.sh"   (POSIX sh, e.g. make)
# Optional: WHEEL_DR_VENV (default <repo>/.venv), WHEEL_DR_ROS_WS (default <repo>/.ros_ws).

_wdr_src="${BASH_SOURCE:-}"
if [ -z "$_wdr_src" ] && [ -n "${ZSH_VERSION:-}" ]; then
    eval '_wdr_src="${(%):-%x}"'
fi
if [ -n "${WHEEL_DR_ROOT:-}" ]; then
    _wdr_root="$WHEEL_DR_ROOT"
elif [ -n "$_wdr_src" ]; then
    _wdr_root="$(cd "$(dirname "$_wdr_src")/.." && pwd)"
else
    _wdr_root="$(pwd)"
fi
_wdr_root="$(cd "$_wdr_root" && pwd -P)"
_wdr_venv="$(cd "${WHEEL_DR_VENV:-$_wdr_root/.venv}" 2>/dev/null && pwd -P || echo "${WHEEL_DR_VENV:-$_wdr_root/.venv}")"
_wdr_ws="${WHEEL_DR_ROS_WS:-$_wdr_root/.ros_ws}"
_wdr_prefix="$(cd "$_wdr_ws/install" 2>/dev/null && pwd -P || echo "$_wdr_ws/install")"
_wdr_pyver="$("$_wdr_venv/bin/python" -c 'import sys; print("%d.%d" % sys.version_info[:2])' 2>/dev/null || echo 3.11)"

if [ ! -d "$_wdr_prefix/lib/python$_wdr_pyver/site-packages/tf2_msgs" ]; then
    echo "ros_env.sh: the local tf2_msgs build is missing under $_wdr_prefix; run 'make tf-msgs' first." >&2
fi

# _wdr_prepend VAR ENTRY...: put ENTRY... first on the ':'-list in VAR, dropping older copies.
_wdr_prepend() {
    _wdr_var="$1"; shift
    eval "_wdr_old=\"\${$_wdr_var:-}\""
    _wdr_new=""
    for _wdr_e in "$@"; do _wdr_new="${_wdr_new:+$_wdr_new:}$_wdr_e"; done
    _wdr_rest=""
    _wdr_ifs="$IFS"; IFS=":"
    for _wdr_p in $_wdr_old; do
        [ -n "$_wdr_p" ] || continue
        case ":$_wdr_new:" in *":$_wdr_p:"*) continue ;; esac
        _wdr_rest="${_wdr_rest:+$_wdr_rest:}$_wdr_p"
    done
    IFS="$_wdr_ifs"
    eval "export $_wdr_var=\"\$_wdr_new\${_wdr_rest:+:\$_wdr_rest}\""
}

_wdr_prepend AMENT_PREFIX_PATH "$_wdr_prefix" "$_wdr_venv"
_wdr_prepend PYTHONPATH "$_wdr_prefix/lib/python$_wdr_pyver/site-packages"
_wdr_prepend LD_LIBRARY_PATH "$_wdr_prefix/lib" "$_wdr_venv/lib"

unset _wdr_src _wdr_root _wdr_venv _wdr_ws _wdr_prefix _wdr_pyver _wdr_var _wdr_old _wdr_new \
    _wdr_e _wdr_rest _wdr_ifs _wdr_p
unset -f _wdr_prepend
