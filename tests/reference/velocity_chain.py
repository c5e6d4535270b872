#!/usr/bin/env python3
"""The velocity path's half-band decimator and its whole response, from scipy.

1. Tables: the three half-band tables of dsp-core/src/overall/halfband.rs
   (VHB_LAST, VHB_MID, VHB_FIRST) are the shortest equiripple half-bands
   (scipy.signal.remez, one-band trick of Vaidyanathan & Nguyen, IEEE Trans.
   Circuits Syst. 34(3), 1987, as in halfband_tables.py) with >= 66 dB over
   [0.5 - fp, 0.5] for the pass edges fp = 1/8, 1/16, 1/32 of the stage's
   input rate (band plan in halfband.rs: the velocity band B <= fo/4).
2. Alias rejection of the whole chain (scipy.signal.freqz of each stage at
   its own rate, multiplied): every input frequency up to fs/2 that folds
   into the velocity band [0, 1000 Hz] at the output rate fo is rejected by
   >= 60 dB, at 51.2 kS/s (factor 8), 25.6 kS/s (4), 102.4 kS/s (16),
   12 kS/s (2) and 44.1 kS/s (8).
3. Response: the velocity gain |V/A| of the chain (half-bands, then
   scipy.signal.butter(2, [10, 1000], 'bandpass', fs=fo, output='sos'), times
   the trapezoidal integrator T/2 (1 + z^-1)/(1 - z^-1); the Rust code folds
   the integrator into the band-pass, cancelling one of its zeros at z = 1,
   which is the same response), relative to the ideal integrator
   1/(2 pi f), at the frequencies of VELOCITY_GAIN_SCIPY in
   dsp-core/tests/frontend_velocity.rs, which that test compares with the
   node's velocity RMS of sines. --check compares the committed values
   (1e-4 relative).

Usage: velocity_chain.py            print the tables and the gain table
       velocity_chain.py --check    check the committed ones (exit 1 on mismatch)
"""
import math
import os
import re
import sys

import numpy as np
import scipy.signal as sig

from halfband_tables import design, rejection_db

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.normpath(os.path.join(HERE, "..", ".."))
RUST = os.path.join(ROOT, "dsp-core", "src", "overall", "halfband.rs")
TEST = os.path.join(ROOT, "dsp-core", "tests", "frontend_velocity.rs")
STOP_DB = 66.0
ALIAS_DB = 60.0
BAND = (10.0, 1000.0)
MIN_RATE = 4000.0
TABLES = (("VHB_LAST", 1 / 8), ("VHB_MID", 1 / 16), ("VHB_FIRST", 1 / 32))
# (fs, f) pairs of the Rust test: in-band and near the edges, at 51.2 and 25.6 kS/s
GAIN_POINTS = [(51200.0, f) for f in (20.0, 50.0, 100.0, 300.0, 700.0, 1000.0)] + [
    (25600.0, f) for f in (50.0, 500.0)
]


def shortest(fp):
    n = 3
    while True:
        try:
            full, outer = design(n, fp)
            att = rejection_db(full, fp)
            if att >= STOP_DB:
                return n, full, outer, att
        except ValueError:
            pass
        n += 4


def committed_tables():
    src = open(RUST, encoding="utf-8").read()
    out = {}
    for m in re.finditer(r"pub const (VHB_\w+): \[f32; (\d+)\] = \[([^\]]*)\]", src):
        out[m.group(1)] = [float(v.strip()) for v in m.group(3).split(",") if v.strip()]
    return out


def full_taps(outer):
    k = len(outer) - 1
    n = 4 * k + 3
    h = np.zeros(n)
    for j, c in enumerate(outer):
        h[2 * j] = h[n - 1 - 2 * j] = c
    h[n // 2] = 0.5
    return h


def chain(fs, tables):
    """Stage taps from the input on (the last stage uses VHB_LAST, ...) and fo."""
    stages = 0
    while stages < 6 and fs / 2 ** (stages + 1) >= MIN_RATE:
        stages += 1
    names = []
    for i in range(stages):
        p = stages - 1 - i
        names.append("VHB_LAST" if p == 0 else "VHB_MID" if p == 1 else "VHB_FIRST")
    return [full_taps(np.array(tables[n], dtype=np.float32).astype(np.float64)) for n in names], fs / 2 ** stages


def chain_response(fs, taps, f):
    """|H| of the cascade at input frequencies f (each stage at its own rate)."""
    h = np.ones_like(f, dtype=complex)
    r = fs
    for t in taps:
        _, resp = sig.freqz(t, worN=f, fs=r)
        h *= resp
        r /= 2
    return np.abs(h)


def alias_rejection_db(fs, taps, fo):
    f = np.linspace(0.0, fs / 2, 1 << 18)
    folded = np.abs(((f + fo / 2) % fo) - fo / 2)  # where f lands at the output rate
    mask = (folded <= BAND[1]) & (f > fo - BAND[1])
    return -20 * math.log10(chain_response(fs, taps, f[mask]).max())


def velocity_gain(fs, tables, f):
    """|V/A| relative to 1/(2 pi f): half-bands, band-pass, trapezoidal integrator."""
    taps, fo = chain(fs, tables)
    dec = chain_response(fs, taps, np.array([f]))[0]
    sos = sig.butter(2, BAND, btype="bandpass", fs=fo, output="sos")
    _, h = sig.sosfreqz(sos, worN=[f], fs=fo)
    z1 = np.exp(-2j * math.pi * f / fo)  # z^-1 on the unit circle
    integ = 0.5 / fo * (1 + z1) / (1 - z1)  # trapezoidal rule T/2 (1 + z^-1)/(1 - z^-1)
    return dec * abs(h[0] * integ) * 2 * math.pi * f


def committed_gains():
    src = open(TEST, encoding="utf-8").read()
    m = re.search(r"const VELOCITY_GAIN_SCIPY: \[\(f32, f64, f64\); \d+\] = \[(.*?)\];", src, re.S)
    if not m:
        return []
    return [tuple(float(x) for x in t) for t in re.findall(r"\(([\d.e+-]+), ([\d.e+-]+), ([\d.e+-]+)\)", m.group(1))]


def main():
    check = "--check" in sys.argv
    rows = [(name, fp, *shortest(fp)) for name, fp in TABLES]
    bad = 0
    have = committed_tables()
    for name, fp, n, full, outer, att in rows:
        if not check:
            vals = ", ".join(f"{c:.9e}" for c in outer)
            print(f"/// fp = {fp}: {n} taps, {att:.1f} dB\npub const {name}: [f32; {len(outer)}] = [{vals}];")
            continue
        got = have.get(name)
        if got is None or len(got) != len(outer):
            print(f"{name}: committed {got} vs scipy length {len(outer)}")
            bad += 1
            continue
        err = max(abs(a - b) for a, b in zip(got, outer))
        att32 = rejection_db(full_taps(np.array(got, dtype=np.float32).astype(np.float64)), fp)
        ok = err <= 1e-7 and att32 >= STOP_DB
        bad += 0 if ok else 1
        print(f"{name}: {n} taps, max |committed - scipy| = {err:.2e}, rejection {att32:.1f} dB"
              f" {'ok' if ok else 'MISMATCH'}")
    tables = have if check else {name: list(outer) for name, _, _, _, outer, _ in rows}
    for fs in (51200.0, 25600.0, 102400.0, 12000.0, 44100.0):
        taps, fo = chain(fs, tables)
        rej = alias_rejection_db(fs, taps, fo)
        ok = rej >= ALIAS_DB
        bad += 0 if ok else 1
        print(f"fs {fs:.0f}: factor {2 ** len(taps)}, fo {fo:.0f} Hz, alias rejection into"
              f" [0, {BAND[1]:.0f}] Hz {rej:.1f} dB {'ok' if ok else 'LOW'}")
    gains = [(fs, f, velocity_gain(fs, tables, f)) for fs, f in GAIN_POINTS]
    if not check:
        print(f"const VELOCITY_GAIN_SCIPY: [(f32, f64, f64); {len(gains)}] = [")
        for fs, f, g in gains:
            print(f"    ({fs:.1f}, {f:.1f}, {g:.6f}),")
        print("];")
    else:
        got = committed_gains()
        if len(got) != len(gains):
            print(f"VELOCITY_GAIN_SCIPY: {len(got)} committed rows vs {len(gains)}")
            bad += 1
        for (fs, f, g), (cfs, cf, cg) in zip(gains, got):
            ok = (fs, f) == (cfs, cf) and abs(cg - g) <= 1e-4 * g
            bad += 0 if ok else 1
            print(f"gain at {f:.0f} Hz, fs {fs:.0f}: scipy {g:.6f}, committed {cg:.6f} {'ok' if ok else 'MISMATCH'}")
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
