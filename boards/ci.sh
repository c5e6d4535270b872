#!/usr/bin/env bash
# Board CI: builds every image, runs the on-target tests and the qemu-mps2
# image under QEMU (always with a timeout), checks the frames against a numpy
# reference and byte for byte against the host build, prints sizes.
# Exits non-zero on any failure. Run from anywhere:  bash boards/ci.sh
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/.." && pwd)"
cd "$here"
target=thumbv7em-none-eabihf
export QEMU_TIMEOUT="${QEMU_TIMEOUT:-120}"
step() { printf '\n== %s\n' "$*"; }

step "tools"
if ! command -v qemu-system-arm >/dev/null 2>&1; then
    apt-get update -qq && apt-get install -y -qq qemu-system-arm
fi
qemu-system-arm --version | head -1
rustup target add "$target" >/dev/null 2>&1 || true
rustup component add llvm-tools >/dev/null 2>&1 || true
command -v defmt-print >/dev/null 2>&1 && echo "defmt-print: $(command -v defmt-print)" \
    || echo "defmt-print not installed: defmt logs are kept raw (decoding skipped, images still run)"

step "build (one package per cargo call: see README, feature unification)"
cargo build --release -p qemu-mps2
cargo build --release -p nrf52840-dk
cargo build -p target-tests --tests

step "on-target tests under QEMU (defmt-test)"
cargo test -p target-tests

step "qemu-mps2 image on the committed input: dsp-core pipeline (default core)"
run_dir="$(mktemp -d)"
trap 'rm -rf "$run_dir"' EXIT
input_files=(qemu-mps2/input/recording.i16 qemu-mps2/input/tach.u32 qemu-mps2/input/config.bin)
mkdir -p "$run_dir/pipe" "$run_dir/overall"
cp "${input_files[@]}" "$run_dir/pipe/"
QEMU_RUN_DIR="$run_dir/pipe" DEFMT_RAW="$run_dir/pipe/defmt.raw" \
    ./qemu-run.sh "target/$target/release/qemu-mps2" 2> "$run_dir/pipe/stderr.txt" \
    | { grep -v '^$' || true; }
cat "$run_dir/pipe/stderr.txt"
grep -q '^done: 2 cycles, 2 frames, 2 watchdog feeds' "$run_dir/pipe/stderr.txt"

step "pipeline frames: host build vs QEMU, byte for byte"
(cd "$root" && ENVORD_HOST_PIPELINE_FRAMES_OUT="$run_dir/host-pipe.bin" \
    cargo test -q -p firmware --test pipeline_core)
cmp "$run_dir/host-pipe.bin" "$run_dir/pipe/frames.bin"
echo "host and QEMU pipeline frames identical ($(stat -c %s "$run_dir/pipe/frames.bin") bytes)"

step "first pipeline frame: envord analyze on the host vs QEMU, byte for byte"
python3 qemu-mps2/input/to_wav.py "$run_dir"
envord_hex="$(cd "$root" && cargo run -q -p host-sim -- analyze "$run_dir/recording.wav" \
    --point boards/qemu-mps2/input/point.toml --tach "$run_dir/edges.csv" \
    --frame-hex --node-id 1 --seq 0)"
qemu_hex="$(head -c "$(( ${#envord_hex} / 2 ))" "$run_dir/pipe/frames.bin" | od -An -v -tx1 | tr -d ' \n')"
echo "envord: $envord_hex"
echo "QEMU:   $qemu_hex"
[ "$envord_hex" = "$qemu_hex" ] || { echo "envord and QEMU frames differ"; exit 1; }
echo "envord analyze and the QEMU image send the same frame"

step "qemu-mps2 image with the overall-only core"
cp "${input_files[@]}" "$run_dir/overall/"
: > "$run_dir/overall/core-overall"
QEMU_RUN_DIR="$run_dir/overall" DEFMT_RAW="$run_dir/overall/defmt.raw" \
    ./qemu-run.sh "target/$target/release/qemu-mps2" 2> "$run_dir/overall/stderr.txt" > /dev/null
cat "$run_dir/overall/stderr.txt"
grep -q '^done: 2 cycles, 2 frames, 2 watchdog feeds' "$run_dir/overall/stderr.txt"

step "overall frames vs numpy reference"
(cd qemu-mps2/input && python3 reference_frames.py --check "$run_dir/overall/frames.bin")
git -C "$root" diff --exit-code -- boards/qemu-mps2/input/expected_frames.txt

step "overall frames: host build vs QEMU, byte for byte"
(cd "$root" && ENVORD_HOST_FRAMES_OUT="$run_dir/host-overall.bin" \
    cargo test -q -p firmware --test replay)
cmp "$run_dir/host-overall.bin" "$run_dir/overall/frames.bin"
echo "host and QEMU overall frames identical ($(stat -c %s "$run_dir/overall/frames.bin") bytes)"

step "configuration downlink under QEMU: good one applied, corrupted one refused"
gen="$here/qemu-mps2/input/make_input.py"
for case in good corrupt; do
    d="$(mktemp -d)"
    cp qemu-mps2/input/recording.i16 qemu-mps2/input/tach.u32 qemu-mps2/input/config.bin "$d/"
    : > "$d/core-overall" # record lengths below are the configured ones (no early stop)
    if [ "$case" = good ]; then (cd "$d" && python3 "$gen" downlink 32); else (cd "$d" && python3 "$gen" downlink 32 corrupt); fi
    QEMU_RUN_DIR="$d" DEFMT_RAW="$d/defmt.raw" ./qemu-run.sh "target/$target/release/qemu-mps2" > /dev/null 2> "$d/err"
    grep -E '^(cycle|done)' "$d/err"
    if [ "$case" = good ]; then
        # applied and stored: the stored record is the downlink's, and the
        # remaining 285 blocks give two more records of 138 blocks (32 rev at 1400 rpm)
        tail -c +2 "$d/downlink.bin" | cmp - "$d/config.bin"
        grep -q '^cycle 0: 275 blocks.*downlink ConfigApplied' "$d/err"
        grep -q '^cycle 2: 138 blocks' "$d/err"
        grep -q '^done: 3 cycles, 3 frames, 3 watchdog feeds' "$d/err"
    else
        cmp qemu-mps2/input/config.bin "$d/config.bin"
        grep -q '^cycle 0: 275 blocks.*downlink Refused(Config(BadCrc))' "$d/err"
        grep -q '^done: 2 cycles, 2 frames, 2 watchdog feeds' "$d/err"
    fi
    rm -rf "$d"
done

step "exit codes under QEMU: HardFault and missing input fail the run"
expect_exit() { # expect_exit CODE FILE-TO-CREATE...
    local want="$1" dir rc
    shift
    dir="$(mktemp -d)"
    for f in "$@"; do : > "$dir/$f"; done
    set +e
    QEMU_RUN_DIR="$dir" DEFMT_RAW="$dir/defmt.raw" ./qemu-run.sh "target/$target/release/qemu-mps2" 2> "$dir/err"
    rc=$?
    set -e
    tail -1 "$dir/err"
    rm -rf "$dir"
    [ "$rc" = "$want" ] || { echo "expected exit $want, got $rc"; exit 1; }
}
expect_exit 4 trigger-hardfault
expect_exit 3

step "sizes and stack high-water"
./size.sh
