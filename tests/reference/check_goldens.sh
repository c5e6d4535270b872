#!/usr/bin/env bash
# Regenerates the front-end goldens with scipy into a temporary directory and
# compares them numerically with the committed ones (rel. tolerance 1e-9,
# abs. 1e-12; design magnitudes are stored rounded to 1e-6 dB, so 2e-6 dB there).
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
data="$here/../../dsp-core/tests/data/frontend"
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
python3 "$here/frontend_golden.py" "$tmp"
python3 - "$data" "$tmp" <<'PY'
import json, math, sys
committed, fresh = sys.argv[1], sys.argv[2]
bad = 0
def cmp(a, b, path):
    global bad
    if isinstance(a, dict):
        if set(a) != set(b):
            print(f"{path}: keys differ"); bad += 1; return
        for k in a:
            if k in ("scipy", "source"):
                continue
            cmp(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list):
        if len(a) != len(b):
            print(f"{path}: length {len(a)} vs {len(b)}"); bad += 1; return
        for i, (x, y) in enumerate(zip(a, b)):
            cmp(x, y, f"{path}[{i}]")
    elif isinstance(a, (int, float)) and not isinstance(a, bool):
        tol = 2e-6 if ".mag_db" in path else max(1e-12, 1e-9 * abs(b))
        if not (math.isfinite(a) and abs(a - b) <= tol):
            if bad < 20:
                print(f"{path}: committed {a} vs regenerated {b}")
            bad += 1
    elif a != b:
        print(f"{path}: {a!r} vs {b!r}"); bad += 1
for name in ("design_golden.json", "frontend_golden.json"):
    with open(f"{committed}/{name}") as f1, open(f"{fresh}/{name}") as f2:
        cmp(json.load(f1), json.load(f2), name)
print("goldens match" if bad == 0 else f"{bad} mismatches")
sys.exit(1 if bad else 0)
PY
