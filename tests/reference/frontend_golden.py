#!/usr/bin/env python3
"""Golden data for the dsp-core envelope front end, computed with scipy/numpy.

Outputs (into OUTDIR, default dsp-core/tests/data/frontend):
  design_golden.json    scipy.signal.butter(N, [lo, hi], 'bandpass', fs, output='sos')
                        magnitude (sosfreqz) on a grid and group delay at the band centre.
  frontend_golden.json  whole front end on the committed CWRU excerpt:
                        sosfilt(scipy design) -> square or abs -> for each decimator stage
                        lfilter(h, 1, x)[M-1::M], where the stage taps h are re-derived here
                        (odd stages scipy.signal.kaiserord + firwin(window=('kaiser', beta)),
                        half-bands scipy.signal.remez via halfband_tables.py) using the band
                        plan documented in dsp-core/src/frontend/decimate/. Also numpy/scipy.stats
                        overall indicators of the raw excerpt.

  --extract  re-creates the committed excerpt from the CWRU WAV (needs the dataset).
"""
import json
import math
import os
import sys

import numpy as np
import scipy.io.wavfile
import scipy.signal as sig
import scipy.stats

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import halfband_tables  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.normpath(os.path.join(HERE, "..", "..", "dsp-core", "tests", "data", "frontend"))
EXCERPT = os.path.join(DATA, "cwru_ir007_1hp_de_excerpt.f32")
WAV = os.path.normpath(os.path.join(HERE, "..", "..", "..", "shared", "data", "cwru",
                                    "cwru-12k-de-ir007-1hp.de.wav"))
START, LEN = 12000, 6000  # samples 12000..17999 (1.0 s .. 1.5 s) at 12 kHz

# Decimator band plan (mirrors dsp-core/src/frontend/decimate/).
STOP_DB = 66.0
PASS_FRACTION = 0.4


def stage_factors(d):
    """Odd primes (7, 5, 3) merged greedily into stages <= 8, sorted largest first,
    then one half-band stage per factor 2."""
    out = []
    rest = d
    for p in (7, 5, 3):
        while rest % p == 0:
            rest //= p
            if out and out[-1] * p <= 8:
                out[-1] *= p
            else:
                out.append(p)
    out.sort(reverse=True)
    while rest % 2 == 0:
        rest //= 2
        out.append(2)
    assert rest == 1
    return out


def decimator_taps(d):
    """Per stage: odd factors kaiserord(STOP_DB, width) and firwin(n, 1/M,
    window=('kaiser', beta)); factor-2 stages the equiripple half-band designed
    by halfband_tables.py (scipy.signal.remez) for the stage's input rate."""
    taps = []
    rate_in = float(d)
    for m in stage_factors(d):
        rate_out = rate_in / m
        width = 2.0 * (rate_out - 2.0 * PASS_FRACTION) / rate_in
        if m == 2:
            # Equiripple half-band (scipy.signal.remez), as the tables in decimate.rs.
            n, h, _, _ = halfband_tables.shortest(min(round(rate_in), 8))
        else:
            n, beta = sig.kaiserord(STOP_DB, width)
            h = sig.firwin(n, 1.0 / m, window=("kaiser", beta))
        taps.append((m, h))
        rate_in = rate_out
    return taps


def centre_hz(lo, hi, fs):
    return fs / math.pi * math.atan(math.sqrt(math.tan(math.pi * lo / fs) * math.tan(math.pi * hi / fs)))


def design_cases():
    cases = []
    for fs in (12000, 25600, 51200, 102400):
        # Our own band grid (octaves from 3 kHz, a top band to 45 kHz, and a
        # low band for 12 kS/s records).
        for lo, hi in ((1500, 4500), (3000, 6000), (6000, 12000), (12000, 24000), (24000, 45000)):
            if hi >= 0.95 * fs / 2:
                continue
            for poles in (4, 8):
                sos = sig.butter(poles // 2, [lo, hi], btype="bandpass", fs=fs, output="sos")
                f, h = sig.sosfreqz(sos, worN=400, fs=fs)
                mag_db = 20 * np.log10(np.maximum(np.abs(h), 1e-300))
                fc = centre_hz(lo, hi, fs)
                gd = sum(sig.group_delay((s[:3], s[3:]), w=[fc], fs=fs)[1][0] for s in sos)
                cases.append({"fs": fs, "lo": lo, "hi": hi, "poles": poles,
                              "freq_hz": [round(float(x), 4) for x in f[1:]],
                              "mag_db": [round(float(x), 6) for x in mag_db[1:]],
                              "centre_hz": fc, "group_delay_centre": float(gd)})
    return cases


def frontend_cases(x):
    fs, band, poles, dec = 12000, (1500, 4500), 8, 8
    sos = sig.butter(poles // 2, band, btype="bandpass", fs=fs, output="sos")
    bp = sig.sosfilt(sos, x.astype(np.float64))
    stages = decimator_taps(dec)
    out = []
    for rect in ("square", "abs"):
        y = bp * bp if rect == "square" else np.abs(bp)
        for m, h in stages:
            y = sig.lfilter(h, 1.0, y)[m - 1::m]
        out.append({"rectifier": rect, "fs": fs, "band_hz": list(band), "poles": poles,
                    "decimation": dec, "envelope": [float(v) for v in y]})
    xd = x.astype(np.float64)
    mean = float(np.mean(xd))
    std = float(np.std(xd))
    peak = float(np.max(np.abs(xd - mean)))
    overall = {"count": int(len(xd)), "mean": mean, "rms_ac": std, "peak": peak,
               "peak_to_peak": float(np.ptp(xd)), "crest_factor": peak / std,
               "kurtosis": float(scipy.stats.kurtosis(xd, fisher=False))}
    # Envelope delay in input samples: scipy group delay of the band-pass at the band
    # centre plus each FIR's group delay (at 0.1 x its rate) scaled to input samples.
    fc = centre_hz(band[0], band[1], fs)
    delay = sum(sig.group_delay((s[:3], s[3:]), w=[fc], fs=fs)[1][0] for s in sos)
    scale = 1
    for m, h in stages:
        delay += sig.group_delay((h, [1.0]), w=[0.1], fs=1.0)[1][0] * scale
        scale *= m
    return {"delay_input_samples": float(delay),
            "stages": [{"factor": m, "taps": [float(t) for t in h]} for m, h in stages],
            "cases": out, "overall": overall}


def main():
    args = sys.argv[1:]
    if args and args[0] == "--extract":
        fs, w = scipy.io.wavfile.read(WAV)
        assert fs == 12000 and w.dtype == np.float32
        w[START:START + LEN].astype("<f4").tofile(EXCERPT)
        return
    outdir = args[0] if args else DATA
    os.makedirs(outdir, exist_ok=True)
    x = np.fromfile(EXCERPT, dtype="<f4")
    assert len(x) == LEN, "excerpt truncated"
    with open(os.path.join(outdir, "design_golden.json"), "w") as f:
        json.dump({"source": "scipy.signal.butter/sosfreqz/group_delay " + sig.__name__,
                   "scipy": scipy.__version__, "cases": design_cases()}, f)
    with open(os.path.join(outdir, "frontend_golden.json"), "w") as f:
        g = frontend_cases(x)
        g["scipy"] = scipy.__version__
        json.dump(g, f)


if __name__ == "__main__":
    main()
