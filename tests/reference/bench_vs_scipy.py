#!/usr/bin/env python3
"""Side-by-side throughput: `envord` and the dsp-core pipeline against
scipy/numpy pipelines on the same recording. Prints figures only (no
pass/fail).

Recording: `envord simulate --seconds 10.5 --rpm 1500` (the built-in fictional
demo machine, 25.6 kS/s float32 WAV), channel 0 = acceleration in g. Eight
copies (seeds 1-8) for the batch and multi-core rows.

Rows (all best of the rounds; rounds interleave every measurement, because
the machine is shared and its load changes):

* `envord analyze`: process start, WAV load, the whole diagnosis.
* `envord batch --jobs 1|2` over the 8 records, per record.
* dsp-core `NodePipeline` in process: one record on one thread, and the 8
  records on 2 threads (`dsp-core/examples/throughput.rs`).
* scipy/numpy, full: every step the node does, with the node's choices
  (decimation factors from the core, the same decimator taps): clip count
  and overall statistics (mean, AC RMS, peak, peak-to-peak, crest factor,
  kurtosis); velocity RMS (subtract the first sample, the same half-band chain,
  4-pole 10-1000 Hz band-pass with the trapezoidal integrator folded into
  section 0, settle 0.25 s); the envelope (8-pole band-pass, square, the
  same decimator); order tracking at 64 samples/rev (4-tap Catmull-Rom,
  vectorised); 4096-point spectrum (mean removal, periodic Hann, rfft,
  power mean, amplitude, the bins up to S/4 orders); and a defect search of
  the same shape for each bearing (4 kinds x 5 harmonics: wide window peak
  with shaft-harmonic masking and parabolic interpolation, median floor,
  prominence, anchor and narrow re-search, sidebands for BPFI and BSF, the
  decision rules). It mirrors the steps, not the node's exact arithmetic.
  Also on 2 processes over the 8 records.
* scipy/numpy, reduced (the earlier comparison): sosfilt, square, three
  half-band stages by upfirdn (factor 8), rfft 4096 + power mean.
* The 8-pole band-pass alone: dsp-core `BiquadCascade` and `scipy.signal.sosfilt`
  (a sequential recurrence: one sample cannot start before the last is done).

Usage: python3 tests/reference/bench_vs_scipy.py [--json] [--rounds N]
Needs cargo (builds host-sim and the dsp-core example in release mode).
"""
import json
import math
import multiprocessing as mp
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
from velocity_chain import chain as velocity_chain, committed_tables  # noqa: E402

RPM = 1500.0
SECONDS = 10.5
RECORDS = 8
S = 64  # angle-domain samples per revolution (the point's default)
N = 4096  # spectrum points
REVOLUTIONS = 256  # the point's default record length
# The bearings of dsp-core/examples/throughput.rs: (rollers, d, D), on shaft 0.
BEARINGS = [(9, 7.9, 39.0), (8, 6.7, 31.0)]


def target_dir():
    return os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))


def build():
    for args in (["build", "--release", "-p", "host-sim"],
                 ["build", "--release", "-p", "dsp-core", "--example", "throughput"]):
        subprocess.run(["cargo", *args, "-j2"], cwd=ROOT, check=True,
                       stdout=subprocess.DEVNULL)
    rel = os.path.join(target_dir(), "release")
    return os.path.join(rel, "envord"), os.path.join(rel, "examples", "throughput")


def timed(f):
    t0 = time.perf_counter()
    f()
    return time.perf_counter() - t0


# ---------------------------------------------------------------- scipy: full

def bearing_lines(rollers, d, pd):
    """BPFO, BPFI, FTF, BSF in orders of the shaft (contact angle 0; the
    textbook kinematic formulas)."""
    r = d / pd
    return {"BPFO": rollers / 2 * (1 - r), "BPFI": rollers / 2 * (1 + r),
            "FTF": 0.5 * (1 - r), "BSF": pd / (2 * d) * (1 - r * r)}


def find_peak(a, lo, hi, mask):
    """Largest unmasked local maximum in bins [lo, hi]; parabolic
    interpolation of the log magnitude. Returns (bin position, amplitude)."""
    lo, hi = max(lo, 1), min(hi, len(a) - 2)
    if hi < lo:
        return None
    seg = a[lo:hi + 1]
    left, right = a[lo - 1:hi], a[lo + 1:hi + 2]
    ok = (seg >= left) & (seg >= right) & ~mask[lo:hi + 1]
    if not ok.any():
        return None
    k = lo + int(np.argmax(np.where(ok, seg, -1.0)))
    ya, yb, yc = np.log(a[k - 1:k + 2] + 1e-30)
    den = ya - 2 * yb + yc
    delta = 0.5 * (ya - yc) / den if den != 0 else 0.0
    delta = max(-0.5, min(0.5, delta))
    # Hann kernel correction (sinc(d)/(1-d^2)) as the node does.
    d = abs(delta)
    g = 1.0 if d < 1e-6 else (math.sin(math.pi * d) / (math.pi * d)) / (1 - d * d)
    return k + delta, math.exp(yb - 0.25 * (ya - yc) * delta) / g


def floor_at(a, centre, half, band, mask):
    lo, hi = int(centre - half - band), int(centre + half + band) + 1
    idx = np.arange(max(lo, 1), min(hi, len(a)))
    keep = (np.abs(idx - centre) > half) & ~mask[idx]
    vals = a[idx[keep]]
    return float(np.median(vals)) if len(vals) else 0.0


def defect_search(a, opb, lines, shaft=1.0, harmonics=5, slip=0.02, min_bins=1.5,
                  thr=10.0, refine=1.5, side_thr=8.0, floor_band=0.5, lobe=2.0):
    """The node's search, step by step (defects.rs module docs), for one bearing."""
    n = len(a)
    mask = np.zeros(n, dtype=bool)
    for m in range(1, int(n * opb / shaft) + 1):  # shaft harmonics
        c = m * shaft / opb
        mask[max(int(c - lobe), 0):min(int(c + lobe) + 1, n)] = True
    out = {}
    for kind, line in lines.items():
        prom = []
        for h in range(1, harmonics + 1):
            c = h * line / opb
            half = max(slip * h * line / opb, min_bins)
            if c + half + lobe >= n - 1:
                prom.append(None)
                continue
            p = find_peak(a, int(c - half), int(c + half) + 1, mask)
            fl = floor_at(a, c, half + lobe, floor_band / opb, mask)
            prom.append(None if p is None or fl <= 0 else (p[0], 20 * math.log10(p[1] / fl)))
        anchors = [(v[1], i) for i, v in enumerate(prom[:3]) if v and v[1] >= thr]
        found = 0
        side = -200.0
        if anchors:
            _, ia = max(anchors)
            l_act = prom[ia][0] * opb / (ia + 1)
            for h in range(1, harmonics + 1):
                c = h * l_act / opb
                half = refine + h / (4 * (ia + 1))
                p = find_peak(a, int(c - half), int(c + half) + 1, mask)
                fl = floor_at(a, c, half + lobe, floor_band / opb, mask)
                if p and fl > 0 and 20 * math.log10(p[1] / fl) >= thr:
                    found += 1
                    if h <= 3 and kind in ("BPFI", "BSF"):
                        s_off = (shaft if kind == "BPFI" else lines["FTF"]) / opb
                        sides = [find_peak(a, int(c + sgn * s_off - refine),
                                           int(c + sgn * s_off + refine) + 1, mask)
                                 for sgn in (-1, 1)]
                        if all(sides):
                            side = max(side, 20 * math.log10(min(x[1] for x in sides) / fl))
        detected = {"BPFO": found >= 2, "BPFI": found >= 3 or (found >= 2 and side >= side_thr),
                    "BSF": found >= 2, "FTF": found >= 3}[kind]
        out[kind] = (found, side, detected)
    return out


def scipy_full(x, fs, dec, vdec):
    """Every step of the node on one record (see the module docs)."""
    sos_env = sig.butter(4, [5000.0, 10000.0], btype="bandpass", fs=fs, output="sos")
    env_stages = decimator_taps(dec)
    vrate = fs / vdec
    sos_vel = sig.butter(2, [10.0, 1000.0], btype="bandpass", fs=vrate, output="sos")
    g = sos_vel[0, 0] * 9806.65 * 0.5 / vrate
    sos_vel[0, :3] = [g, 2 * g, g]
    # the velocity path's own half-band chain (dsp-core/src/overall/halfband.rs)
    vel_stages = [(2, h) for h in velocity_chain(fs, committed_tables())[0]]
    lines = [bearing_lines(*b) for b in BEARINGS]
    hann = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(N) / N)
    clip_g = 32767 * 50.0 / 32768

    def run():
        # overall indicators
        clipped = np.count_nonzero(np.abs(x) >= clip_g)
        m = x.mean()
        d = x - m
        d2 = d * d
        s2, s4 = d2.mean(), (d2 * d2).mean()
        rms = math.sqrt(s2)
        peak = np.abs(d).max()
        stats = (m, rms, peak, x.max() - x.min(), peak / rms, s4 / (s2 * s2), clipped)
        # velocity RMS
        v = x - x[0]
        for mm, h in vel_stages:
            v = sig.upfirdn(h, v, down=mm)
        v = sig.sosfilt(sos_vel, v)
        vrms = math.sqrt(np.mean(v[int(0.25 * vrate):] ** 2))
        # envelope
        e = sig.sosfilt(sos_env, x)
        e = e * e
        for mm, h in env_stages:
            e = sig.upfirdn(h, e, down=mm)
        # order tracking: constant speed, Catmull-Rom at S samples/rev
        step = fs / dec * 60.0 / RPM / S
        k = np.arange(int((len(e) - 4) / step))
        pos = 1.0 + k * step
        i = pos.astype(np.int64)
        t = pos - i
        p0, p1, p2, p3 = e[i - 1], e[i], e[i + 1], e[i + 2]
        y = p1 + 0.5 * t * (p2 - p0 + t * (2 * p0 - 5 * p1 + 4 * p2 - p3
                                           + t * (3 * (p1 - p2) + p3 - p0)))
        # spectrum: power mean of up to REVOLUTIONS / (N / S) segments
        segs = min(len(y) // N, REVOLUTIONS * S // N)
        acc = np.zeros(N // 4 + 1)
        scale = 2.0 / (N * 0.5)
        for j in range(segs):
            s = y[j * N:(j + 1) * N]
            s = (s - s.mean()) * hann
            acc += (np.abs(np.fft.rfft(s)[:N // 4 + 1]) * scale) ** 2
        amp = np.sqrt(acc / max(segs, 1))
        opb = S / N
        res = [defect_search(amp, opb, ln) for ln in lines]
        return stats, vrms, res

    return run


def scipy_reduced(x, fs):
    """The earlier, reduced comparison (envelope and spectrum only)."""
    sos = sig.butter(4, [5000.0, 10000.0], btype="bandpass", fs=fs, output="sos")
    stages = decimator_taps(8)

    def run():
        y = sig.sosfilt(sos, x)
        y = y * y
        for m, h in stages:
            y = sig.upfirdn(h, y, down=m)
        w = np.hanning(N + 1)[:-1]
        acc = np.zeros(N // 2 + 1)
        segs = len(y) // N
        for k in range(segs):
            s = y[k * N:(k + 1) * N]
            s = (s - s.mean()) * w
            acc += np.abs(np.fft.rfft(s)) ** 2
        return np.sqrt(acc / max(segs, 1))

    return run


_WORKER = {}


def _worker_init(paths, fs, dec, vdec):
    # Records loaded and filters designed once per worker, outside the timing
    # (as for the one-process row).
    xs = [np.fromfile(p, dtype="<f4").astype(np.float64) for p in paths]
    _WORKER["runs"] = [scipy_full(x, fs, dec, vdec) for x in xs]


def _worker_run(i):
    return _WORKER["runs"][i]()[1]


def main():
    as_json = "--json" in sys.argv
    rounds = 5
    if "--rounds" in sys.argv:
        rounds = int(sys.argv[sys.argv.index("--rounds") + 1])
    envord, core = build()
    with tempfile.TemporaryDirectory() as tmp:
        wavs, raws = [], []
        for seed in range(1, RECORDS + 1):
            wav = os.path.join(tmp, "recs", f"rec{seed}.wav")
            os.makedirs(os.path.dirname(wav), exist_ok=True)
            subprocess.run([envord, "simulate", "--out", wav, "--seconds", str(SECONDS),
                            "--rpm", str(RPM), "--seed", str(seed)],
                           check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            fs, data = scipy.io.wavfile.read(wav)
            x32 = np.ascontiguousarray(data[:, 0] if data.ndim > 1 else data, dtype=np.float32)
            raw = os.path.join(tmp, f"accel{seed}.f32")
            x32.astype("<f4").tofile(raw)
            wavs.append(wav)
            raws.append(raw)
        fs = float(fs)
        x64 = np.fromfile(raws[0], dtype="<f4").astype(np.float64)
        n = len(x64)
        point = os.path.join(ROOT, "host-sim", "examples", "demo-point.toml")
        rec_dir = os.path.dirname(wavs[0])
        core_args = [core, raws[0], str(RPM), "3", str(RECORDS), "2", str(int(fs))]
        info = json.loads(subprocess.run(core_args, check=True, capture_output=True,
                                         text=True).stdout)
        dec, vdec = info["decimation"], info["velocity_decimation"]
        full = scipy_full(x64, fs, dec, vdec)
        reduced = scipy_reduced(x64, fs)
        sos8 = sig.butter(4, [5000.0, 10000.0], btype="bandpass", fs=fs, output="sos")
        pool = mp.Pool(2, initializer=_worker_init, initargs=(raws, fs, dec, vdec))
        pool.map(_worker_run, range(2))  # warm up: workers loaded and imported
        best = {}

        def note(key, t):
            best[key] = min(best.get(key, float("inf")), t)

        for _ in range(rounds):
            note("cli", timed(lambda: subprocess.run(
                [envord, "analyze", wavs[0], "--point", point, "--rpm", str(RPM), "--json"],
                check=True, stdout=subprocess.DEVNULL)))
            for jobs in (1, 2):
                out = os.path.join(tmp, f"batch{jobs}")
                note(f"batch{jobs}", timed(lambda: subprocess.run(
                    [envord, "batch", rec_dir, "--point", point, "--rpm", str(RPM),
                     "--out", out, "--jobs", str(jobs), "--force"],
                    check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)) / RECORDS)
            r = json.loads(subprocess.run(core_args, check=True, capture_output=True,
                                          text=True).stdout)
            note("core", r["seconds"])
            note("core2", r["seconds_records"] / RECORDS)
            note("core_bp", r["bandpass_seconds"])
            for part in ("stats", "velocity", "frontend_envelope"):
                note(f"core_{part}", r[f"{part}_seconds"])
            note("scipy_full", timed(full))
            note("scipy_full2", timed(lambda: pool.map(_worker_run, range(RECORDS))) / RECORDS)
            note("scipy_reduced", timed(reduced))
            note("scipy_bp", timed(lambda: sig.sosfilt(sos8, x64)))
        pool.close()
    rows = [
        ("cli", "envord analyze (process, WAV load, whole diagnosis)"),
        ("batch1", "envord batch --jobs 1, per record (8 records)"),
        ("batch2", "envord batch --jobs 2, per record (8 records)"),
        ("core", "dsp-core NodePipeline, in process, 1 thread"),
        ("core2", "dsp-core NodePipeline, 8 records on 2 threads, per record"),
        ("scipy_full", "scipy/numpy full (every node step), 1 process"),
        ("scipy_full2", "scipy/numpy full, 8 records on 2 processes, per record"),
        ("scipy_reduced", "scipy/numpy reduced: sosfilt, square, 3 x upfirdn, rfft"),
        ("core_bp", "band-pass 8 poles alone: dsp-core BiquadCascade (f32)"),
        ("scipy_bp", "band-pass 8 poles alone: scipy sosfilt (f64)"),
        ("core_stats", "dsp-core alone: overall statistics (sequential f32 sums)"),
        ("core_velocity", "dsp-core alone: velocity path"),
        ("core_frontend_envelope", "dsp-core alone: front end without velocity"),
    ]
    ratios = [
        ("core vs scipy full, 1 core each", best["scipy_full"] / best["core"]),
        ("core vs scipy full, 2 cores each", best["scipy_full2"] / best["core2"]),
        ("envord batch --jobs 2 vs scipy full on 2 processes",
         best["scipy_full2"] / best["batch2"]),
        ("envord analyze vs scipy full", best["scipy_full"] / best["cli"]),
        ("core vs scipy reduced (less work on the scipy side)",
         best["scipy_reduced"] / best["core"]),
        ("band-pass alone: BiquadCascade vs sosfilt", best["scipy_bp"] / best["core_bp"]),
    ]
    result = {
        "samples": n, "sample_rate_hz": fs, "seconds_of_signal": n / fs,
        "decimation": dec, "velocity_decimation": vdec, "rounds": rounds,
        "results": [{"key": k, "what": w, "seconds": best[k], "msps": n / best[k] / 1e6}
                    for k, w in rows],
        "ratios": [{"what": w, "ratio": r} for w, r in ratios],
        "python": sys.version.split()[0], "numpy": np.__version__,
        "scipy": __import__("scipy").__version__, "cores": os.cpu_count(),
        "load_average": os.getloadavg(),
    }
    if as_json:
        print(json.dumps(result, indent=2))
        return
    print(f"recording: {n} samples at {fs:g} Hz ({n / fs:.2f} s), decimation {dec}, "
          f"velocity decimation {vdec}; best of {rounds} interleaved rounds; "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} "
          "(the 2-core rows need idle cores)")
    for k, w in rows:
        print(f"  {w:<60} {best[k] * 1e3:9.2f} ms  {n / best[k] / 1e6:8.2f} MS/s")
    for w, r in ratios:
        print(f"  {w:<60} {r:6.1f}x")


if __name__ == "__main__":
    main()
