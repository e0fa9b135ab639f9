#!/usr/bin/env bash
# Cross-architecture determinism: build the determinism witness for the host
# (x86_64) and for aarch64, run the aarch64 build under qemu user-mode
# emulation, and require byte-identical output. The witness prints digests
# of the core's numerics (libm transcendental functions, gas relations,
# probe inversion, section fits, navigator steps), so any architecture-
# dependent rounding shows up here.
#
# Needs: rustup target aarch64-unknown-linux-gnu, Debian packages
# qemu-user, gcc-aarch64-linux-gnu, libc6-dev-arm64-cross (.ci/run installs
# them).
set -euo pipefail
cd "$(dirname "$0")/.."
export CARGO_TARGET_AARCH64_UNKNOWN_LINUX_GNU_LINKER=aarch64-linux-gnu-gcc
cargo build --locked -q -p upcurrent-tests --bin determinism-witness
cargo build --locked -q -p upcurrent-tests --bin determinism-witness --target aarch64-unknown-linux-gnu
host=$(target/debug/determinism-witness)
arm=$(qemu-aarch64 -L /usr/aarch64-linux-gnu target/aarch64-unknown-linux-gnu/debug/determinism-witness)
echo "x86_64:";  echo "$host"
echo "aarch64:"; echo "$arm"
if [ "$host" != "$arm" ]; then
  echo "cross-architecture digests differ" >&2
  exit 1
fi
echo "cross-architecture digests agree"
