#!/usr/bin/env bash
# Prints flash and RAM use of each board image (release builds) and the stack
# high-water mark of the qemu-mps2 image measured under QEMU by stack painting.
#
#   boards/size.sh            # builds if needed
#
# Also prints instructions per ADC block of the pipeline image under
# `-icount shift=10` (an instruction count, a lower bound for cycles; the
# block budget at 25.6 kHz is 10 ms, 640 000 cycles at 64 MHz), for the
# measurement and for the commissioning band survey, and the stack
# high-water of a run with a survey cycle.
#
# Flash = .text + .rodata + .data (load image); static RAM = .data + .bss
# (+ .uninit). The stack is the rest of RAM; its measured use is printed last.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
cd "$here"
target=thumbv7em-none-eabihf
sysroot="$(rustc --print sysroot)"
size_tool="$sysroot/lib/rustlib/x86_64-unknown-linux-gnu/bin/llvm-size"
if [ ! -x "$size_tool" ]; then
    rustup component add llvm-tools >/dev/null
fi
# one package per cargo call: embassy-nrf turns on cortex-m-rt's `device`
# feature, which must not leak into the QEMU image (no PAC vector table there)
cargo build -q --release -p qemu-mps2
cargo build -q --release -p nrf52840-dk

printf '%-14s %10s %10s %10s %10s\n' board flash_B ram_B flash_% ram_%
for board in qemu-mps2 nrf52840-dk; do
    elf="target/$target/release/$board"
    # llvm-size -A: section name, size, address
    read -r flash ram < <("$size_tool" -A "$elf" | awk '
        $1 == ".vector_table" || $1 == ".text" || $1 == ".rodata" { flash += $2 }
        $1 == ".data" { flash += $2; ram += $2 }
        $1 == ".bss" || $1 == ".uninit" { ram += $2 }
        END { print flash + 0, ram + 0 }')
    # code flash: the nRF52840 keeps its last five pages for records (memory.x)
    if [ "$board" = nrf52840-dk ]; then flash_total=$((1004 * 1024)); else flash_total=$((1024 * 1024)); fi
    printf '%-14s %10d %10d %10.1f %10.1f\n' "$board" "$flash" "$ram" \
        "$(echo "100*$flash/$flash_total" | bc -l)" "$(echo "100*$ram/262144" | bc -l)"
done

# stack high-water: run the QEMU image on the committed input
run_dir="$(mktemp -d)"
trap 'rm -rf "$run_dir"' EXIT
gen="$here/qemu-mps2/input/make_input.py"
cp qemu-mps2/input/recording.i16 qemu-mps2/input/tach.u32 "$run_dir/"
(cd "$run_dir" && python3 "$gen" flash)
log="$run_dir/stderr.txt"
QEMU_RUN_DIR="$run_dir" DEFMT_RAW="$run_dir/defmt.raw" QEMU_TIMEOUT="${QEMU_TIMEOUT:-120}" \
    ./qemu-run.sh "target/$target/release/qemu-mps2" > /dev/null 2> "$log"
grep -E '^stack high-water' "$log" | sed 's/^/qemu-mps2 (dsp-core pipeline) /'
# deterministic instruction counts per block (-icount shift=10, CMSDK timer0)
: > "$run_dir/count-instructions"
QEMU_ICOUNT=1 QEMU_RUN_DIR="$run_dir" DEFMT_RAW="$run_dir/defmt.raw" QEMU_TIMEOUT="${QEMU_TIMEOUT:-120}" \
    ./qemu-run.sh "target/$target/release/qemu-mps2" > /dev/null 2> "$log"
grep -E '^instructions' "$log" | sed 's/^/qemu-mps2 (dsp-core pipeline) /'
# commissioning: a configuration without a band, so the first cycle is a survey
(cd "$run_dir" && python3 "$gen" flash --unset-band)
QEMU_ICOUNT=1 QEMU_RUN_DIR="$run_dir" DEFMT_RAW="$run_dir/defmt.raw" QEMU_TIMEOUT="${QEMU_TIMEOUT:-120}" \
    ./qemu-run.sh "target/$target/release/qemu-mps2" > /dev/null 2> "$log"
grep -E '^band survey instructions' "$log" | sed 's/^/qemu-mps2 (commissioning) /'
grep -E '^stack high-water' "$log" | sed 's/^/qemu-mps2 (commissioning, then a measurement) /'
rm -f "$run_dir/count-instructions"
(cd "$run_dir" && python3 "$gen" flash)
: > "$run_dir/core-overall"
QEMU_RUN_DIR="$run_dir" DEFMT_RAW="$run_dir/defmt.raw" QEMU_TIMEOUT="${QEMU_TIMEOUT:-120}" \
    ./qemu-run.sh "target/$target/release/qemu-mps2" > /dev/null 2> "$log"
grep -E '^stack high-water' "$log" | sed 's/^/qemu-mps2 (overall-only core) /'
