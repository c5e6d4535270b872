#!/usr/bin/env python3
"""Formats the `BENCH|key|value|unit|what` lines of the qemu-bench image as a
table next to the reference figures of the C DSP library measured the same
way (shared/notes/target-facts.md: CMSIS-DSP, gcc 12.2 -O3 -ffast-math, same
QEMU board, -icount shift=10). Standard library only.

Usage: format.py RESULTS.txt [--json]
"""
import json
import sys

# key -> (reference figure, what the reference is)
REFERENCE = {
    "bandpass8": (30.0, "CMSIS-DSP biquad DF2T, 4 stages (plain C loop 44.0)"),
    "bandpass8_square": (34.0, "CMSIS-DSP biquad 4 stages + abs, two calls"),
    "rectify_abs": (4.0, "CMSIS-DSP absolute value"),
    "rectify_square": (4.0, "CMSIS-DSP absolute value (same pass count)"),
    "decimate8": (17.0, "CMSIS-DSP FIR decimator, 32 taps, factor 8 (plain C 25.1)"),
    "envelope_path": (51.0, "three CMSIS-DSP calls: biquad + abs + FIR decimate"),
    "frontend_envelope": (51.0, "three CMSIS-DSP calls (no statistics)"),
    "rfft_1024": (46423.0, "CMSIS-DSP real FFT 1024 (microfft C-side figure 47,546)"),
    "rfft_4096": (236987.0, "CMSIS-DSP real FFT 4096 (microfft C-side figure 231,703)"),
    "magnitude_1024": (7.25, "CMSIS-DSP complex magnitude per bin"),
    "magnitude_4096": (7.25, "CMSIS-DSP complex magnitude per bin"),
    "fft_mag_4096": (236987.0 + 7.25 * 2048, "CMSIS-DSP rfft 4096 + 2048 magnitudes"),
    "fft_mag_1024": (46423.0 + 7.25 * 512, "CMSIS-DSP rfft 1024 + 512 magnitudes"),
}

# Goals from the benchmarks issue (fft_mag_4096 and velocity_path: issue 19).
GOALS = {
    "envelope_path": ("<=", 45.0, "instr/sample"),
    "fft_mag_4096": ("<=", 1.05 * (236987.0 + 7.25 * 2048), "instr/transform"),
    "velocity_path": ("<=", 25.0, "instr/sample"),
    "mem_node_pipeline": ("<=", 40 * 1024, "bytes"),
}


def parse(path):
    rows, info = [], []
    with open(path, encoding="utf-8", errors="replace") as f:
        for line in f:
            line = line.strip()
            if line.startswith("BENCH|"):
                _, key, value, unit, what = line.split("|", 4)
                rows.append({"key": key, "value": float(value), "unit": unit, "what": what})
            elif line.startswith("INFO|"):
                info.append(line[5:])
    return rows, info


def derive(rows):
    by = {r["key"]: r for r in rows}
    out = list(rows)
    if "envelope_path" in by:
        pass  # measured directly by the image (the fused path the front end runs)
    elif "bandpass8_square" in by and "decimate8" in by:
        v = by["bandpass8_square"]["value"] + by["decimate8"]["value"]
        out.append({"key": "envelope_path", "value": v, "unit": "instr/sample",
                    "what": "band-pass 8 with fused square + decimate 8, as the front end runs them"})
    elif all(k in by for k in ("bandpass8", "rectify_square", "decimate8")):
        v = sum(by[k]["value"] for k in ("bandpass8", "rectify_square", "decimate8"))
        out.append({"key": "envelope_path", "value": v, "unit": "instr/sample",
                    "what": "sum of the three stages alone (band-pass 8 + square + decimate 8)"})
    for n in (1024, 4096):
        f, m = by.get(f"rfft_{n}"), by.get(f"magnitude_{n}")
        if f and m:
            out.append({"key": f"fft_mag_{n}", "value": f["value"] + m["value"] * n / 2,
                        "unit": "instr/transform", "what": f"rfft {n} + {n // 2} magnitudes"})
    for r in out:
        ref = REFERENCE.get(r["key"])
        if ref and r["value"] >= 0:
            r["reference"], r["reference_what"] = ref
            r["ratio"] = r["value"] / ref[0]
        goal = GOALS.get(r["key"])
        if goal:
            op, lim, _ = goal
            r["goal"] = f"{op} {lim:g}"
            r["goal_met"] = r["value"] <= lim
    return out


def main():
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    if len(args) != 1:
        sys.exit(__doc__)
    rows, info = parse(args[0])
    if not rows:
        sys.exit("no BENCH lines in " + args[0])
    rows = derive(rows)
    if "--json" in sys.argv:
        print(json.dumps({"results": rows, "info": info}, indent=2))
        return
    print(f"{'benchmark':<30} {'value':>14} {'unit':<16} {'C ref':>12} {'ratio':>7}  goal")
    for r in rows:
        ref = f"{r['reference']:,.2f}" if "reference" in r else ""
        ratio = f"{r['ratio']:.2f}x" if "ratio" in r else ""
        goal = ""
        if "goal" in r:
            goal = r["goal"] + (" ok" if r["goal_met"] else " MISSED")
        print(f"{r['key']:<30} {r['value']:>14,.2f} {r['unit']:<16} {ref:>12} {ratio:>7}  {goal}")
    for line in info:
        print("  " + line)


if __name__ == "__main__":
    main()
