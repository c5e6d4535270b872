#!/usr/bin/env bash
# Board CI: builds every image, runs the on-target tests and the qemu-mps2
# image under QEMU (always with a timeout), checks the frames against a numpy
# reference and byte for byte against the host build, checks authenticated
# downlinks (Python-signed: applied only when valid, refused otherwise, also
# after a power cycle) and the commissioning band survey (the band equals,
# bit for bit, the one `envord analyze` chooses from the same samples),
# prints sizes. Exits non-zero on any failure. Run from anywhere:
#   bash boards/ci.sh
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
gen="$here/qemu-mps2/input/make_input.py"
input_files=(qemu-mps2/input/recording.i16 qemu-mps2/input/tach.u32)
# a run folder with the recording and a provisioned flash image (identity:
# node 1 with the committed test key; configuration: counter 0 + config.bin,
# or as make_input.py's options say)
prepare() { # prepare DIR [make_input.py flash options...]
    local d="$1"
    shift
    mkdir -p "$d"
    cp "${input_files[@]}" "$d/"
    (cd "$d" && python3 "$gen" flash "$@")
}
qemu() { # qemu DIR: runs the image there, stderr to DIR/err
    QEMU_RUN_DIR="$1" DEFMT_RAW="$1/defmt.raw" ./qemu-run.sh "target/$target/release/qemu-mps2" \
        2> "$1/err" | { grep -v '^$' || true; }
}
prepare "$run_dir/pipe"
qemu "$run_dir/pipe"
cat "$run_dir/pipe/err"
# report, boot status frame, report
grep -q '^done: 2 cycles, 3 frames, 2 watchdog feeds' "$run_dir/pipe/err"

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
prepare "$run_dir/overall"
: > "$run_dir/overall/core-overall"
qemu "$run_dir/overall" > /dev/null
cat "$run_dir/overall/err"
grep -q '^done: 2 cycles, 3 frames, 2 watchdog feeds' "$run_dir/overall/err"

step "overall frames vs numpy reference"
(cd qemu-mps2/input && python3 reference_frames.py --check "$run_dir/overall/frames.bin")
git -C "$root" diff --exit-code -- boards/qemu-mps2/input/expected_frames.txt

step "overall frames: host build vs QEMU, byte for byte"
(cd "$root" && ENVORD_HOST_FRAMES_OUT="$run_dir/host-overall.bin" \
    cargo test -q -p firmware --test replay)
cmp "$run_dir/host-overall.bin" "$run_dir/overall/frames.bin"
echo "host and QEMU overall frames identical ($(stat -c %s "$run_dir/overall/frames.bin") bytes)"

step "authenticated configuration downlinks under QEMU (signed by Python's hmac)"
# Overall core (records as long as configured, no early stop). Start: 16
# revolutions at the 1400 rpm minimum = 69 blocks. One downlink per receive
# window: a bad tag, the valid one (counter 7, 32 revolutions = 138 blocks),
# an older counter, another node's, an unauthenticated record.
d="$run_dir/dl"
prepare "$d" --revs 16
: > "$d/core-overall"
(cd "$d" && python3 "$gen" downlinks badtag:7:32 config:7:32 config:6:16 node:8:16 unsigned:16)
qemu "$d" > /dev/null
grep -E '^(config|cycle|status|done)' "$d/err"
check() { grep -q "$1" "$d/err" || { echo "missing in the node's output: $1"; exit 1; }; }
check '^config: Stored, counter 0, node Some(1)'
check '^cycle 0: 69 blocks.*downlink Refused(Auth(BadTag))'
check '^cycle 1: 69 blocks.*downlink ConfigApplied'
check '^cycle 2: 138 blocks.*downlink Refused(Auth(Replayed { counter: 6, stored: 7 }))'
check '^cycle 3: 138 blocks.*downlink Refused(Auth(WrongNode { addressed: 2 }))'
check '^cycle 4: 138 blocks.*downlink Refused(Auth(WrongNode { addressed: 17744 }))'
check '^status 4: counter 7, last downlink WrongNode, refused 4,'
check '^done: 5 cycles, 10 frames, 5 watchdog feeds'
echo "applied only the valid downlink; refused bad tag, old counter, wrong node, unauthenticated"
# Power cycle: the same flash; the applied frame again is a replay.
rm -f "$d/downlinks.bin"
(cd "$d" && python3 "$gen" downlinks config:7:32)
qemu "$d" > /dev/null
grep -E '^(config|cycle 0|done)' "$d/err"
check '^config: Stored, counter 7, node Some(1), band Configured (bits 44fa0000 45fa0000), 138 blocks'
check '^cycle 0: 138 blocks.*downlink Refused(Auth(Replayed { counter: 7, stored: 7 }))'
check '^done: 4 cycles,'
echo "after the power cycle: configuration and counter kept, the replay refused"

step "commissioning under QEMU: band survey on the committed input vs envord analyze"
# No band in the configuration: the first cycle is a band survey over one
# record (275 blocks); its status frame carries the band as IEEE 754 bits.
d="$run_dir/survey"
prepare "$d" --unset-band
: > "$d/count-instructions"
QEMU_ICOUNT=1 qemu "$d" > /dev/null
grep -E '^(config|cycle|status|done|band survey|stack)' "$d/err"
check '^cycle 0: 275 blocks, 0 edges.*kind Survey'
check '^status 0: counter 0, last downlink None, refused 0, survey Stored, band Survey'
check '^cycle 1: .*kind Measure'
check '^done: 2 cycles, 2 frames, 2 watchdog feeds'
python3 qemu-mps2/input/to_wav.py "$d" $((275 * 256))
grep -v '^band_hz' qemu-mps2/input/point.toml > "$d/point.toml"
(cd "$root" && cargo run -q -p host-sim -- analyze "$d/recording.wav" --point "$d/point.toml" \
    --tach "$d/edges.csv" --json) > "$d/analyze.json"
python3 - "$d" <<'PY'
import json, struct, sys
d = sys.argv[1]
frames = open(f"{d}/frames.bin", "rb").read()
status = frames[:27]
assert status[0] == 0x12, "first frame is not a status frame"
node_band = status[15:23]
node_k = struct.unpack(">h", status[23:25])[0] / 100
env = json.load(open(f"{d}/analyze.json"))["envelope"]
assert env["band_auto"] is True
host_band = struct.pack(">ff", *env["band_hz"])
print(f"node:   band {node_band.hex()} = {struct.unpack('>ff', node_band)} Hz, kurtosis {node_k}")
print(f"envord: band {host_band.hex()} = {tuple(env['band_hz'])} Hz, kurtosis {env['band_kurtosis']:.6f}")
assert node_band == host_band, "the node and envord analyze chose different bands"
assert abs(node_k - env["band_kurtosis"]) <= 0.005 + 1e-6, "kurtosis differs"
print("same band, bit for bit; kurtosis within the frame's 0.01 step")
PY
bits="$(python3 -c "import json,struct;e=json.load(open('$d/analyze.json'))['envelope'];print(' '.join(struct.pack('>f',x).hex() for x in e['band_hz']))")"
check "^status 0: .*band Survey .*(bits $bits)"
# Power cycle: the surveyed band is stored; no new survey.
rm -f "$d/count-instructions"
qemu "$d" > /dev/null
grep -E '^(config|cycle 0)' "$d/err"
check "^config: Stored, counter 0, node Some(1), band Survey (bits $bits)"
check '^cycle 0: .*kind Measure'

step "exit codes under QEMU: HardFault and missing input fail the run"
expect_exit() { # expect_exit CODE FILE-TO-CREATE...
    local want="$1" dir rc
    shift
    dir="$(mktemp -d)"
    for f in "$@"; do
        if [ "$f" = flash ]; then (cd "$dir" && python3 "$gen" flash); else : > "$dir/$f"; fi
    done
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
expect_exit 3 flash # a flash image but no recording

step "sizes and stack high-water"
./size.sh
