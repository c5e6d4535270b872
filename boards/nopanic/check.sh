#!/usr/bin/env bash
# No-panic check: links a thumbv7em-none-eabihf release image that drives
# dsp-core's public API with opaque inputs and whose panic handler calls a
# function defined nowhere (see src/main.rs). The link succeeds only if no
# panic path is reachable after optimisation.
#
# On failure it relinks with the symbol defined and lists each surviving
# call into the panic machinery with the inline chain's first frame in our
# code (locate.sh; needs addr2line). Also useful by hand:
#   the linker map: $CARGO_TARGET_DIR/thumbv7em-none-eabihf/release/nopanic.map
#   cargo asm (cargo-show-asm) on the function named by locate.sh.
set -euo pipefail
cd "$(dirname "$0")"
TARGET_DIR=${CARGO_TARGET_DIR:-$PWD/target}
OUT=$TARGET_DIR/thumbv7em-none-eabihf/release
LOG=$(mktemp)
trap 'rm -f "$LOG"' EXIT

echo "no-panic check: building envord-nopanic (thumbv7em-none-eabihf, release)"
if cargo rustc --release --locked -j2 -- -D warnings -C "link-arg=-Map=$OUT/nopanic.map" >"$LOG" 2>&1; then
  echo "PASS: no panic path is reachable from the dsp-core API, the wire decoders and the firmware node (cycle, downlinks, records, flash store, survey) and the block ring exercised in boards/nopanic/src/main.rs"
  exit 0
fi

if ! grep -q 'undefined symbol: envord_panic_is_reachable' "$LOG"; then
  cat "$LOG"
  echo "ERROR: the no-panic image failed to build for another reason (above)" >&2
  exit 2
fi
grep -A4 'undefined symbol: envord_panic_is_reachable' "$LOG" || true
echo
echo "FAIL: a panic path is reachable (the linker needs envord_panic_is_reachable)."
echo "Relinking with the symbol defined to locate the call sites..."
cargo rustc --release --locked -j2 -- -C "link-arg=--defsym=envord_panic_is_reachable=0" >"$LOG" 2>&1 || {
  cat "$LOG"
  exit 1
}
echo "count | first frame in our code | function | innermost (what panics)"
./locate.sh "$OUT/envord-nopanic"
echo "Fix them in dsp-core (get, iterators, checked/saturating helpers), not here."
# Leave no image behind that looks like a passing build.
rm -f "$OUT/envord-nopanic"
exit 1
