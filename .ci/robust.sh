#!/usr/bin/env bash
# Robustness checks (called from .ci/test-all): the no-panic link check for
# thumbv7em-none-eabihf and a bounded run of every fuzz target.
set -euo pipefail
cd "$(dirname "$0")/.."

step() { printf '\n=== %s ===\n' "$*"; }

step "no-panic link check (boards/nopanic)"
rustup target add thumbv7em-none-eabihf >/dev/null
bash boards/nopanic/check.sh

step "fuzz smoke runs (cargo-fuzz, nightly)"
if ! rustup run nightly rustc --version >/dev/null 2>&1; then
  rustup toolchain install nightly --profile minimal
fi
if ! cargo +nightly fuzz --version >/dev/null 2>&1; then
  cargo install cargo-fuzz --locked
fi
RUNS=${FUZZ_RUNS:-20000} bash fuzz/smoke.sh

echo
echo "robustness checks passed"
