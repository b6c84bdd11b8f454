#!/usr/bin/env bash
# Install the host tools some checks use, when missing and the machine allows
# (root + apt-get): clang with its fuzzer and sanitizer runtime (the frame
# fuzzer, tools/fuzz_wire.sh; a second compiler for the bit-identity checks)
# and qemu-user (runs the cross-built core's test vectors).  Quiet when all
# are present; prints what is missing otherwise.  Tests that need a missing
# tool skip with that reason (and fail under CI=true where they must run).
set -euo pipefail

need=()
command -v clang >/dev/null 2>&1 || need+=(clang)
[ -n "$(ls /usr/lib/llvm-*/lib/clang/*/lib/linux/libclang_rt.fuzzer-x86_64.a 2>/dev/null)" ] || need+=(libclang-rt-14-dev)
command -v qemu-arm >/dev/null 2>&1 || need+=(qemu-user)
[ ${#need[@]} -eq 0 ] && exit 0

if [ "$(id -u)" != "0" ] || ! command -v apt-get >/dev/null 2>&1; then
    echo "install_host_tools: missing ${need[*]} (needs root and apt-get to install here)" >&2
    exit 1
fi
echo "install_host_tools: installing ${need[*]}" >&2
apt-get update -qq >/dev/null
DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${need[@]}" >/dev/null
