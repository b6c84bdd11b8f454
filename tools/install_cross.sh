#!/usr/bin/env bash
# Install the Arm bare-metal cross compiler used by the target budget
# (python/peerfix/budget, tools/cross_build.py) when it is missing.
#
# Needs: arm-none-eabi-gcc with its libgcc multilibs (package gcc-arm-none-eabi)
# and the newlib headers for <string.h>, <stdint.h> (libnewlib-arm-none-eabi;
# only the headers are used: the core links no C library, c_core/port supplies
# memset/memcpy/memmove).
#
# Idempotent and quiet when everything is there.  Installs through apt-get
# only when running as root on a Debian-like machine; otherwise it prints
# what to install and exits 1.
# Usage: tools/install_cross.sh [--check]   (--check: report only, never install)
set -euo pipefail

packages=(gcc-arm-none-eabi binutils-arm-none-eabi libnewlib-arm-none-eabi)

have_toolchain() {
    command -v arm-none-eabi-gcc >/dev/null 2>&1 || return 1
    # A compile that includes <string.h> proves the newlib headers are there.
    printf '#include <string.h>\n#include <stdint.h>\nint f(void);\n' |
        arm-none-eabi-gcc -mcpu=cortex-m0plus -mthumb -x c -c -o /dev/null - >/dev/null 2>&1 || return 1
    # The Cortex-M0+ (v6-M) libgcc multilib must exist.
    local libgcc
    libgcc=$(arm-none-eabi-gcc -mcpu=cortex-m0plus -mthumb -print-libgcc-file-name)
    [ -f "$libgcc" ]
}

if have_toolchain; then
    exit 0
fi

if [ "${1:-}" = "--check" ]; then
    echo "install_cross: arm-none-eabi-gcc (with newlib headers) is missing; install: ${packages[*]}" >&2
    exit 1
fi

if [ "$(id -u)" != "0" ] || ! command -v apt-get >/dev/null 2>&1; then
    echo "install_cross: arm-none-eabi-gcc (with newlib headers) is missing and this machine" >&2
    echo "  cannot install it here (needs root and apt-get)." >&2
    echo "  Install the packages ${packages[*]} (Debian/Ubuntu names) or an Arm GNU" >&2
    echo "  toolchain with arm-none-eabi-gcc on PATH, then run this again." >&2
    exit 1
fi

echo "install_cross: installing ${packages[*]} ..." >&2
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq >/dev/null
apt-get install -y -qq --no-install-recommends "${packages[@]}" >/dev/null

if ! have_toolchain; then
    echo "install_cross: installed ${packages[*]} but the toolchain check still fails" >&2
    exit 1
fi
echo "install_cross: $(arm-none-eabi-gcc --version | head -n 1)" >&2
