#!/usr/bin/env bash
# Cargo runner: runs a thumbv7em image on QEMU's mps2-an386 (Cortex-M4F) with
# semihosting, always under a timeout, and passes QEMU's exit status through.
#
#   qemu-run.sh APP.elf
#
# Environment:
#   QEMU_TIMEOUT   seconds before the run is killed (default 120)
#   QEMU_RUN_DIR   working directory of the guest's semihosting file calls
#                  (default: the current directory)
#   QEMU_ICOUNT    set to 1 for deterministic instruction counting (-icount shift=10)
#   DEFMT_RAW      file for the raw defmt stream when defmt-print is missing
#                  (default: APP.elf.defmt)
# defmt frames arrive on stdout; they are decoded by defmt-print when it is
# installed, otherwise saved raw (decode later: defmt-print -e APP.elf < file).
set -uo pipefail
elf="$(realpath "$1")"
shift
timeout_s="${QEMU_TIMEOUT:-120}"
run_dir="${QEMU_RUN_DIR:-$PWD}"
extra=()
if [ "${QEMU_ICOUNT:-0}" = 1 ]; then extra+=(-icount shift=10); fi
cmd=(timeout --kill-after=5 "$timeout_s" qemu-system-arm -machine mps2-an386 -cpu cortex-m4
     -display none -serial null -monitor none
     -semihosting-config enable=on,target=native "${extra[@]}" -kernel "$elf")
cd "$run_dir" || exit 3
if command -v defmt-print >/dev/null 2>&1; then
    "${cmd[@]}" < /dev/null | defmt-print -e "$elf"
    status=("${PIPESTATUS[@]}")
    rc="${status[0]}"
else
    raw="${DEFMT_RAW:-$elf.defmt}"
    "${cmd[@]}" < /dev/null > "$raw"
    rc=$?
    echo "qemu-run: defmt-print not installed; raw defmt log in $raw" >&2
fi
if [ "$rc" = 124 ] || [ "$rc" = 137 ]; then
    echo "qemu-run: TIMEOUT after ${timeout_s}s: $elf" >&2
fi
exit "$rc"
