#!/usr/bin/env python3
"""Equiripple half-band tables of the envelope decimator, designed with
scipy.signal.remez, and a check of the tables committed in
dsp-core/src/frontend/decimate/design.rs.

A factor-2 stage with input rate r_in (in units of the final output rate fo)
must pass [0, 0.4 fo] and reject from r_in/2 - 0.4 fo (band plan in
decimate.rs), i.e. pass edge fp = 0.4 / r_in of its input rate and stop edge
0.5 - fp: a half-band specification. Half-band stages are always the last
ones, so r_in = 2, 4, 8, ...; the r_in >= 8 stages share the r_in = 8 design
(their transition is only wider).

Design: see design() (remez one-band trick), N = 4k + 3; the taps at even
distance from the centre are exactly 0, the centre exactly 0.5, so
H(f) + H(0.5 - f) = 1; the pass band is equiripple (DC gain 1 within the
same ripple as the stop band, 3.4e-4 for the r_in = 2 table). N is the
shortest length with >= 66 dB rejection (the decimator's STOP_DB) over
[0.5 - fp, 0.5].

Usage: halfband_tables.py          print the tables as Rust constants
       halfband_tables.py --check  compare with decimate/design.rs (1e-7) and verify the rejection
"""
import math
import os
import re
import sys

import numpy as np
import scipy.signal as sig

HERE = os.path.dirname(os.path.abspath(__file__))
RUST = os.path.normpath(os.path.join(HERE, "..", "..", "dsp-core", "src", "frontend", "decimate", "design.rs"))
STOP_DB = 66.0
PASS_FRACTION = 0.4
RATES = (2, 4, 8)  # input rate of the stage in units of the final output rate


def design(n, fp):
    """Optimal half-band of length n = 4k + 3 by the one-band trick: an even
    length-(2k + 2) equiripple g on [0, 2 fp] (type II, zero at Nyquist),
    h[2j] = g[j] / 2, centre 0.5 (Vaidyanathan & Nguyen, "A trick for the
    design of FIR half-band filters", IEEE Trans. Circuits Syst. 34(3), 1987)."""
    k = (n - 3) // 4
    g = sig.remez(2 * (k + 1), [0.0, 2.0 * fp], [1.0], fs=1.0)
    full = np.zeros(n)
    for j, c in enumerate(g):
        full[2 * j] = c / 2.0
    full[n // 2] = 0.5
    outer = np.array([full[2 * j] for j in range(k + 1)])
    return full, outer


def rejection_db(h, fp):
    w, resp = sig.freqz(h, worN=1 << 15, fs=1.0)
    return -20.0 * math.log10(np.abs(resp[w >= 0.5 - fp]).max())


def shortest(r_in):
    fp = PASS_FRACTION / r_in
    n = 3
    while True:
        try:
            full, outer = design(n, fp)
            att = rejection_db(full, fp)
            if att >= STOP_DB:
                return n, full, outer, att
        except ValueError:
            pass  # remez did not converge at this length
        n += 4


def committed():
    """Tables in decimate/design.rs: `const HB_R{r}: [f32; k] = [ ... ];`"""
    src = open(RUST, encoding="utf-8").read()
    out = {}
    for m in re.finditer(r"const HB_R(\d+): \[f32; (\d+)\] = \[([^\]]*)\]", src):
        vals = [float(v.strip().removesuffix("_f32")) for v in m.group(3).split(",") if v.strip()]
        out[int(m.group(1))] = vals
    return out


def main():
    rows = [(r, *shortest(r)) for r in RATES]
    if "--check" not in sys.argv:
        for r, n, _, outer, att in rows:
            vals = ", ".join(f"{c:.9e}" for c in outer)
            print(f"/// r_in = {r}: {n} taps, {att:.1f} dB")
            print("#[allow(clippy::excessive_precision)] // f64 design values, rounded to f32 here")
            print(f"pub const HB_R{r}: [f32; {len(outer)}] = [{vals}];")
        return
    have = committed()
    bad = 0
    for r, n, full, outer, att in rows:
        got = have.get(r)
        if got is None or len(got) != len(outer):
            print(f"HB_R{r}: committed {got} vs scipy length {len(outer)}")
            bad += 1
            continue
        err = max(abs(a - b) for a, b in zip(got, outer))
        # The committed f32 table itself must reject >= STOP_DB.
        table = np.zeros(n)
        for j, c in enumerate(got):
            table[2 * j] = table[n - 1 - 2 * j] = c
        table[n // 2] = 0.5
        att32 = rejection_db(table, PASS_FRACTION / r)
        ok = err <= 1e-7 and att32 >= STOP_DB
        bad += 0 if ok else 1
        print(f"HB_R{r}: {n} taps, max |committed - scipy| = {err:.2e}, rejection {att32:.1f} dB"
              f" {'ok' if ok else 'MISMATCH'}")
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
