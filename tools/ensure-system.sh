#!/bin/sh
# Installs what the bootstrap needs from Debian when it is missing: the ngspice shared
# library (libngspice0) and the venv module of the Python in $1 (python3.X-venv, which a
# minimal Debian leaves out). As root it uses apt-get; otherwise it names the packages.
set -e
python="${1:-python3}"
missing=""
if ! "$python" -c "import ctypes.util, sys; sys.exit(0 if ctypes.util.find_library('ngspice') else 1)"; then
    missing="libngspice0"
fi
if ! "$python" -c "import ensurepip, venv" 2>/dev/null; then
    version=$("$python" -c "import sys; print('%d.%d' % sys.version_info[:2])")
    missing="$missing python$version-venv"
fi
[ -z "$missing" ] && exit 0
if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
    echo "installing Debian packages:$missing" >&2
    apt-get update -qq
    # shellcheck disable=SC2086 # one word per package
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $missing >/dev/null
    exit 0
fi
echo "missing Debian packages:$missing" >&2
echo "(as root: apt-get install$missing), then run this command again." >&2
exit 1
