#!/usr/bin/env bash
# Builds the benchmark image, runs it on QEMU mps2-an386 with deterministic
# instruction counting and prints the table (or JSON with --json).
# Usage: boards/qemu-bench/run.sh [--json]      (from any directory)
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
if ! command -v qemu-system-arm >/dev/null; then
  echo "installing qemu-system-arm" >&2
  apt-get install -y qemu-system-arm >&2 || { apt-get update >&2 && apt-get install -y qemu-system-arm >&2; }
fi
rustup target add thumbv7em-none-eabihf >/dev/null 2>&1 || true
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$here/target}"
(cd "$here" && cargo build --release -j2 >&2)
elf="$CARGO_TARGET_DIR/thumbv7em-none-eabihf/release/qemu-bench"
out="${BENCH_RESULTS:-$CARGO_TARGET_DIR/qemu-bench-results.txt}"
BENCH_TIMEOUT="${BENCH_TIMEOUT:-300}" "$here/qemu-run.sh" "$elf" >"$out" 2>&1 || {
  rc=$?; cat "$out" >&2; echo "qemu-bench failed with status $rc" >&2; exit "$rc"; }
python3 "$here/format.py" "$out" "$@"
