#!/bin/sh
# Installs Debian's ngspice shared library when none is found on the loader path.
set -e
if python3 -c "import ctypes.util, sys; sys.exit(0 if ctypes.util.find_library('ngspice') else 1)"; then
    exit 0
fi
if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
    echo "ngspice shared library not found: installing Debian package libngspice0" >&2
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq libngspice0 >/dev/null
    exit 0
fi
echo "ngspice shared library not found. Install the Debian package 'libngspice0'" >&2
echo "(as root: apt-get install libngspice0), then run this command again." >&2
exit 1
