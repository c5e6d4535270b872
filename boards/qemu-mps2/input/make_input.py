#!/usr/bin/env python3
"""Writes the committed QEMU input: a fictional test-stand recording.

Scenario (invented): stand "TS-7", an electric motor at 1480 rpm driving a
fan, one deep-groove bearing with an outer-race defect. 25.6 kHz, 12-bit ADC
in i16, one tach pulse per revolution timestamped in sample-clock ticks.

Also writes config.bin with an encoder written here independently of the
firmware (layout from firmware/src/config.rs docs, CRC from zlib.crc32), so
the image's decoding cross-checks the record format.

    python3 make_input.py            # writes recording.i16, tach.u32, config.bin
    python3 make_input.py downlink REVS [corrupt]   # writes downlink.bin (0x01 + record)
"""
import struct
import zlib

import numpy as np

FS = 25_600
RPM = 1480.0
SECONDS = 5.6
RNG = np.random.default_rng(7)


def config_record(revs=64):
    body = b"EP" + bytes([1, 0])  # magic, version, length patched below
    body += struct.pack("<I", FS)
    body += struct.pack("<ff", 2000.0, 8000.0)  # band
    body += struct.pack("<BBH", 4, 1, revs)  # poles, pulses/rev, record revolutions
    body += struct.pack("<ff", 1400.0, 3600.0)  # speed range rpm
    body += struct.pack("<I", FS)  # tach ticks = sample clock
    body += struct.pack("<HI", 50, 3600)  # settle ms, interval s
    body += struct.pack("<HhHH", 4, 2047, 1, 100)  # flat, clip level, clip/saturated per mille
    body += struct.pack("<H", 3000)  # low battery mV
    body += struct.pack("<ff", 6.0, 12.0)  # alert / alarm dB
    body += struct.pack("<f", 0.008789)  # g per count: 100 mV/g sensor, 3.6 V / 4096 counts
    body += bytes([1, 0])  # one bearing
    # geometry: 9 elements, 7.94 mm, pitch 39.04 mm, 0 deg (fictional bearing)
    body += bytes([1, 9]) + struct.pack("<f", 1.0) + struct.pack("<ffff", 7.94, 39.04, 0.0, 0.0)
    length = len(body) + 4
    body = body[:3] + bytes([length]) + body[4:]
    return body + struct.pack("<I", zlib.crc32(body))


def recording():
    n = int(SECONDS * FS)
    t = np.arange(n) / FS
    f_shaft = RPM / 60.0
    # BPFO = z/2 (1 - d/D cos a) orders (rolling-bearing kinematics, common practice)
    bpfo = 9 / 2 * (1 - 7.94 / 39.04) * f_shaft
    x = 300.0 * np.sin(2 * np.pi * f_shaft * t)  # 1x unbalance
    ring = np.exp(-800.0 * t[:256]) * np.sin(2 * np.pi * 4000.0 * t[:256])
    impulses = np.zeros(n)
    for k in np.arange(0, SECONDS, 1 / bpfo):
        impulses[int(k * FS)] = 1.0
    x += 400.0 * np.convolve(impulses, ring)[:n]
    x += RNG.normal(0.0, 40.0, n)
    samples = np.clip(np.round(x), -2048, 2047).astype("<i2")
    edges = np.round(np.arange(0.013, SECONDS, 1 / f_shaft) * FS).astype("<u4")
    return samples, edges


if __name__ == "__main__":
    import sys

    if len(sys.argv) >= 3 and sys.argv[1] == "downlink":
        rec = bytearray(config_record(int(sys.argv[2])))
        if len(sys.argv) > 3 and sys.argv[3] == "corrupt":
            rec[9] ^= 0x01  # one flipped bit: the CRC must catch it
        with open("downlink.bin", "wb") as f:
            f.write(b"\x01" + rec)
        sys.exit(0)
    samples, edges = recording()
    samples.tofile("recording.i16")
    edges.tofile("tach.u32")
    with open("config.bin", "wb") as f:
        f.write(config_record())
    print(f"{len(samples)} samples, {len(edges)} edges, config {len(config_record())} bytes")
