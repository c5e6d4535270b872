#!/usr/bin/env bash
# Lists every call into the panic machinery that survives in the release
# image, with the inline chain down to the first frame in our own code.
# Usage: locate.sh ELF   (an image linked with the panic symbol defined;
# check.sh builds one with --defsym when the real link fails).
set -euo pipefail
ELF=$1
SYSROOT=$(rustc --print sysroot)
OBJDUMP=$(ls "$SYSROOT"/lib/rustlib/*/bin/llvm-objdump | head -1)
command -v addr2line >/dev/null || { echo "locate.sh: needs addr2line (binutils)" >&2; exit 2; }
DIS=$(mktemp)
trap 'rm -f "$DIS"' EXIT
"$OBJDUMP" -d -C --no-show-raw-insn "$ELF" >"$DIS"
# Addresses of the panic entry points present in the image.
targets=$(grep -E '^[0-9a-f]+ <(core::panicking::[^>]*|core::slice::index::[^>]*|core::option::(expect|unwrap)_failed[^>]*|core::result::unwrap_failed[^>]*|core::cell::panic[^>]*|__rustc::rust_begin_unwind)>:$' "$DIS" |
  awk '{print $1}' | sed 's/^0*//')
[ -n "$targets" ] || { echo "no panic entry points in $ELF"; exit 0; }
pattern=$(echo "$targets" | paste -sd'|')
sites=$(grep -P "\tb(l|\.w)?\t0x($pattern) " "$DIS" | awk '{print $1}' | tr -d :)
for a in $sites; do
  # Inline chain, innermost first: print the innermost frame and the first
  # frame outside the standard library / registry (our code), with its line.
  # Frames without one of ours are out-of-line helpers: the enclosing symbol
  # then names who was compiled into them.
  encl=$(awk -v a="$a" '/^[0-9a-f]+ <.*>:$/ {fn=$0} index($1, a":")==1 {print fn; exit}' "$DIS" | sed 's/^[0-9a-f]* //')
  addr2line -e "$ELF" -i -f -C "0x$a" | paste - - | awk -F'\t' -v encl="$encl" '
    NR==1 { inner=$1 }
    !found && $2 !~ /^\/rustc\// && $2 !~ /\.cargo\/registry/ && $2 !~ /^\?\?/ { ours=$2; fn=$1; found=1 }
    END { if (!found) { fn="(in " encl ")"; ours="-" }
          printf "%s | %s | %s\n", ours, fn, inner }'
done | sort | uniq -c | sort -rn
