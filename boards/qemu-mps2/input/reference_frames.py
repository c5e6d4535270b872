#!/usr/bin/env python3
"""Independent numpy computation of the overall-only frames the firmware
should send for the committed input (recording.i16, tach.u32, config.bin).

Writes expected_frames.txt (one frame per line, hex) and, with --check FILE,
compares a frames file (QEMU's or the host's) with it field by field,
allowing 1 unit in the last place of each rounded field (f32 on target vs
f64 here).

Reference formulas: RMS about the mean (numpy.std), peak about the mean,
crest factor = peak / RMS, speed = (edges - 1) * 60 * fs / (last - first).
"""
import struct
import sys

import numpy as np

BLOCK = 256


def read_config(path="config.bin"):
    b = open(path, "rb").read()
    fs = struct.unpack_from("<I", b, 4)[0]
    ppr = b[17]
    revs = struct.unpack_from("<H", b, 18)[0]
    rpm_min = struct.unpack_from("<f", b, 20)[0]
    tick_hz = struct.unpack_from("<I", b, 28)[0]
    return fs, ppr, revs, rpm_min, tick_hz


def expected():
    fs, ppr, revs, rpm_min, tick_hz = read_config()
    x = np.fromfile("recording.i16", dtype="<i2").astype(np.float64)
    edges = np.fromfile("tach.u32", dtype="<u4").astype(np.int64)
    blocks = int(np.ceil(revs * 60.0 / rpm_min * fs / BLOCK))
    per = blocks * BLOCK
    frames = []
    for r in range(len(x) // per):
        seg = x[r * per:(r + 1) * per]
        mean = seg.mean()
        rms = seg.std()
        peak = max(seg.max() - mean, mean - seg.min())
        crest = peak / rms if rms > 0 else 0.0
        e = edges[(edges >= r * per) & (edges < (r + 1) * per)]
        flags = 0
        if len(e) >= 2:
            speed = (len(e) - 1) / ppr * 60.0 * tick_hz / (e[-1] - e[0])
        else:
            speed = 0.0
            flags |= 1  # TACH_MISSING
        clipped = np.count_nonzero(np.abs(seg) >= 2047)
        if clipped * 1000 // len(seg) >= 1 and clipped > 0:
            flags |= 2
        fields = (
            int(rms * 10 + 0.5),
            int(peak + 0.5),
            int(crest * 1000 + 0.5),
            int(speed * 10 + 0.5),
        )
        frames.append((flags, fields))
    return frames


def encode(flags, fields):
    return bytes([0x4F, flags]) + struct.pack("<HHHI", *fields)


def decode(b):
    return b[1], struct.unpack("<HHHI", b[2:12])


def overall_frames(data):
    """The 12-byte overall frames of a frames file; the node's 27-byte status
    frames (type byte 0x12, docs/frame-format.md) between them are skipped."""
    out = []
    i = 0
    while i < len(data):
        if data[i] == 0x12:
            i += 27
        elif data[i] == 0x4F:
            out.append(data[i:i + 12])
            i += 12
        else:
            sys.exit(f"unexpected frame start {data[i]:#04x} at byte {i}")
    return out


def main():
    exp = expected()
    with open("expected_frames.txt", "w") as f:
        for flags, fields in exp:
            f.write(encode(flags, fields).hex() + "\n")
    if len(sys.argv) == 3 and sys.argv[1] == "--check":
        got = overall_frames(open(sys.argv[2], "rb").read())
        if len(got) != len(exp) or any(len(g) != 12 for g in got):
            sys.exit(f"{sys.argv[2]}: {len(got)} overall frames, expected {len(exp)} of 12 bytes")
        for i, (flags, fields) in enumerate(exp):
            gflags, gfields = decode(got[i])
            bad = gflags != flags or any(abs(a - b) > 1 for a, b in zip(gfields, fields))
            print(f"frame {i}: got {gflags:#04x} {gfields}, numpy {flags:#04x} {fields}"
                  + ("  MISMATCH" if bad else "  ok"))
            if bad:
                sys.exit(1)


if __name__ == "__main__":
    main()
