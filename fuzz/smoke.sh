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
[ ${#TARGETS[@]} -gt 0 ] || TARGETS=(frame_decode point_parse wav_pipeline tach_edges downlink_open config_store)

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
    # Both node targets start from the committed test stand's configuration
    # record (version 1, one bearing, 88 bytes); layouts in the targets' docs.
    downlink_open)
      local cfg=../boards/qemu-mps2/input/config.bin
      # mode 1: counter 5, stored 4, then the payload (signed by the target)
      { printf '\1\0\0\0\5\0\0\0\4\1'; cat "$cfg"; } >"corpus/$t/set-config.seed"
      printf '\1\0\0\0\5\0\0\0\4\2' >"corpus/$t/measure-now.seed"
      printf '\1\0\0\0\5\0\0\0\4\3\52\53' >"corpus/$t/baseline.seed"
      # mode 2: counter, stored, version bit (0: version 1), the record's fields
      { printf '\2\0\0\0\5\0\0\0\4\0'; tail -c +5 "$cfg" | head -c -4; } \
        >"corpus/$t/record-fields.seed"
      # the same fields with four copies of its bearing (count byte 4)
      four_bearings >"corpus/$t/four-bearings.fields"
      { printf '\2\0\0\0\5\0\0\0\4\0'; cat "corpus/$t/four-bearings.fields"; } \
        >"corpus/$t/record-four-bearings.seed"
      rm "corpus/$t/four-bearings.fields"
      # mode 0: a frame as received (for another key: refused at the tag)
      { printf '\0\1\1\7\0\0\0\145\2'; printf '\0%.0s' 1 2 3 4 5 6 7 8; } \
        >"corpus/$t/frame.seed" ;;
    config_store)
      local cfg=../boards/qemu-mps2/input/config.bin
      # mode 1, flags 0: copy A seq 2 = counter 7 + record, copy B seq 1 =
      # empty; no power cut (255), nothing new
      { printf '\1\0\2\0\0\0\134\7\0\0\0'; cat "$cfg"; printf '\1\0\0\0\0\377\0'; } \
        >"corpus/$t/stored-config.seed"
      # mode 2: copy A seq 2 = counter 7, version bit 0, 80 field bytes
      { printf '\2\0\2\0\0\0\7\0\0\0\0\120'; tail -c +5 "$cfg" | head -c -4;
        printf '\1\0\0\0\0\0\0\0\0\0\20\4'; printf 'abcd'; } \
        >"corpus/$t/record-fields.seed"
      { printf '\2\0\2\0\0\0\7\0\0\0\0\222'; four_bearings;
        printf '\1\0\0\0\0\0\0\0\0\0\377\0'; } >"corpus/$t/record-four-bearings.seed" ;;
  esac
}

# The committed record's field bytes (after magic, version and length,
# before the CRC) with its one bearing repeated four times: 146 bytes.
four_bearings() {
  local f
  f=$(mktemp)
  tail -c +5 ../boards/qemu-mps2/input/config.bin | head -c -4 >"$f"
  head -c 56 "$f"
  printf '\4'
  tail -c +58 "$f" | head -c 1
  for _ in 1 2 3 4; do tail -c 22 "$f"; done
  rm -f "$f"
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
