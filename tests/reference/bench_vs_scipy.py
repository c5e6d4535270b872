#!/usr/bin/env python3
"""Side-by-side throughput: `envord analyze` and the dsp-core pipeline alone
against a scipy/numpy pipeline doing the same signal steps on the same
recording. Prints figures only (no pass/fail).

Recording: `envord simulate --seconds 10.5 --rpm 1500` (the built-in fictional
demo machine, 51.2 kS/s float32 WAV), channel 0 = acceleration in g.

scipy pipeline (the steps of the envelope front end, without order tracking
or defect search, so it does less work than ours):
  sosfilt(butter(4, [5 kHz, 10 kHz], 'bandpass', fs, output='sos'))
  -> square
  -> three half-band FIR stages, upfirdn(h, x, down=2) (only kept outputs),
     taps from kaiserord + firwin as tests/reference/frontend_golden.py
  -> 4096-point segments: mean removal, Hann, numpy rfft, |X|, power mean.

Usage: python3 tests/reference/bench_vs_scipy.py [--json] [--repeats N]
Needs cargo (builds host-sim and the dsp-core example in release mode).
"""
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import scipy.io.wavfile
import scipy.signal as sig

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.normpath(os.path.join(HERE, "..", ".."))
sys.path.insert(0, HERE)
from frontend_golden import decimator_taps  # noqa: E402

RPM = 1500.0
SECONDS = 10.5


def target_dir():
    return os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))


def build():
    for args in (["build", "--release", "-p", "host-sim"],
                 ["build", "--release", "-p", "dsp-core", "--example", "throughput"]):
        subprocess.run(["cargo", *args, "-j2"], cwd=ROOT, check=True,
                       stdout=subprocess.DEVNULL)
    rel = os.path.join(target_dir(), "release")
    return os.path.join(rel, "envord"), os.path.join(rel, "examples", "throughput")


def best_of(n, f):
    best = float("inf")
    for _ in range(n):
        t0 = time.perf_counter()
        f()
        best = min(best, time.perf_counter() - t0)
    return best


def scipy_pipeline(x, fs):
    sos = sig.butter(4, [5000.0, 10000.0], btype="bandpass", fs=fs, output="sos")
    stages = decimator_taps(8)

    def run():
        y = sig.sosfilt(sos, x)
        y = y * y
        for m, h in stages:
            y = sig.upfirdn(h, y, down=m)
        n = 4096
        w = np.hanning(n + 1)[:-1]
        acc = np.zeros(n // 2 + 1)
        segs = len(y) // n
        for k in range(segs):
            s = y[k * n:(k + 1) * n]
            s = (s - s.mean()) * w
            acc += np.abs(np.fft.rfft(s)) ** 2
        return np.sqrt(acc / max(segs, 1))

    return run


def main():
    as_json = "--json" in sys.argv
    repeats = 5
    if "--repeats" in sys.argv:
        repeats = int(sys.argv[sys.argv.index("--repeats") + 1])
    envord, core = build()
    with tempfile.TemporaryDirectory() as tmp:
        wav = os.path.join(tmp, "rec.wav")
        subprocess.run([envord, "simulate", "--out", wav, "--seconds", str(SECONDS), "--rpm", str(RPM)],
                       check=True, stdout=subprocess.DEVNULL)
        fs, data = scipy.io.wavfile.read(wav)
        x32 = np.ascontiguousarray(data[:, 0] if data.ndim > 1 else data, dtype=np.float32)
        raw = os.path.join(tmp, "accel.f32")
        x32.astype("<f4").tofile(raw)
        n = len(x32)
        point = os.path.join(ROOT, "host-sim", "examples", "demo-point.toml")
        t_cli = best_of(repeats, lambda: subprocess.run(
            [envord, "analyze", wav, "--point", point, "--rpm", str(RPM), "--json"],
            check=True, stdout=subprocess.DEVNULL))
        out = subprocess.run([core, raw, str(RPM), str(repeats)], check=True,
                             capture_output=True, text=True).stdout
        t_core = json.loads(out)["seconds"]
        x64 = x32.astype(np.float64)
        t_scipy = best_of(repeats, scipy_pipeline(x64, float(fs)))
    rows = [
        ("envord analyze (process, WAV load, whole diagnosis)", t_cli),
        ("dsp-core NodePipeline alone (in-process)", t_core),
        ("scipy/numpy: sosfilt, square, 3 x upfirdn, rfft 4096", t_scipy),
    ]
    result = {
        "samples": n, "sample_rate_hz": float(fs), "seconds_of_signal": n / fs,
        "results": [{"what": w, "seconds": t, "msps": n / t / 1e6} for w, t in rows],
        "ratio_core_vs_scipy": t_scipy / t_core,
        "ratio_cli_vs_scipy": t_scipy / t_cli,
        "python": sys.version.split()[0], "numpy": np.__version__,
        "scipy": __import__("scipy").__version__,
    }
    if as_json:
        print(json.dumps(result, indent=2))
        return
    print(f"recording: {n} samples at {fs} Hz ({n / fs:.2f} s), best of {repeats}")
    for w, t in rows:
        print(f"  {w:<56} {t * 1e3:9.2f} ms  {n / t / 1e6:8.2f} MS/s")
    print(f"  speed-up core vs scipy: {result['ratio_core_vs_scipy']:.1f}x"
          f"   envord analyze vs scipy: {result['ratio_cli_vs_scipy']:.1f}x")


if __name__ == "__main__":
    main()
