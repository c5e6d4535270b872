#!/usr/bin/env bash
# Short bounded run of every cargo-fuzz target (CI): each must survive RUNS
# executions (default 20000) from its seed corpus without a crash. Needs the
# nightly toolchain and cargo-fuzz (.ci/robust.sh installs them).
#   RUNS=200000 fuzz/smoke.sh           longer
#   fuzz/smoke.sh tach_edges            one target
set -euo pipefail
cd "$(dirname "$0")"
RUNS=${RUNS:-20000}
TARGETS=("$@")
[ ${#TARGETS[@]} -gt 0 ] || TARGETS=(frame_decode point_parse wav_pipeline tach_edges)

# Seed corpora from files in the repository (copied, never edited in place).
seed() {
  local t=$1
  mkdir -p "corpus/$t"
  case $t in
    point_parse) cp ../host-sim/examples/*.toml "corpus/$t/" ;;
    wav_pipeline)
      for f in ../host-sim/tests/data/*.wav; do
        # First byte is the fuzz target's mode byte (0 = strict, f32 path).
        { printf '\0'; head -c 4096 "$f"; } >"corpus/$t/$(basename "$f").seed"
      done ;;
  esac
}

# Debug assertions on (overflow checks too); no sanitizer: the code under
# test is safe Rust, and a panic or failed assertion is what we look for.
FLAGS=(--debug-assertions --sanitizer none)
for t in "${TARGETS[@]}"; do
  seed "$t"
  echo "=== fuzz $t: $RUNS runs ==="
  log=$(mktemp)
  rc=0
  cargo +nightly fuzz run "${FLAGS[@]}" "$t" "corpus/$t" -- \
    -runs="$RUNS" -max_len=4096 -timeout=10 -print_final_stats=1 >"$log" 2>&1 || rc=$?
  grep -E '^Done|stat::number_of_executed_units|stat::average_exec_per_sec|panicked|ERROR|SUMMARY' "$log" || true
  if [ "$rc" -ne 0 ]; then
    tail -40 "$log"
    rm -f "$log"
    echo "FAIL: fuzz target $t exited $rc (crash input under fuzz/artifacts/$t)" >&2
    exit 1
  fi
  rm -f "$log"
done
echo "fuzz smoke: all ${#TARGETS[@]} targets passed $RUNS runs"
