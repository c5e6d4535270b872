#!/usr/bin/env bash
# Runs an image on QEMU mps2-an386 with deterministic instruction counting
# (-icount shift=10: 1024 ns of virtual time per instruction). Works with
# closed stdin. Usage: qemu-run.sh APP.elf
set -euo pipefail
exec timeout "${BENCH_TIMEOUT:-600}" qemu-system-arm -machine mps2-an386 -cpu cortex-m4 \
  -icount shift=10 -display none -serial null -monitor none \
  -semihosting-config enable=on,target=native -kernel "$1"
