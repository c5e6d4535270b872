#!/usr/bin/env python3
"""Writes the committed QEMU input: a fictional test-stand recording.

Scenario (invented): stand "TS-7", an electric motor at 1480 rpm driving a
fan, one deep-groove bearing with an outer-race defect. 25.6 kHz, 12-bit ADC
in i16, one tach pulse per revolution timestamped in sample-clock ticks.

Also writes config.bin (a version-1 configuration record) and node.key (the
stand's downlink key), and on request the emulated flash and signed
downlinks, all with encoders written here independently of the firmware
(layouts from the docs of firmware/src/config.rs, store.rs, identity.rs and
downlink_auth.rs; CRC from zlib.crc32, HMAC-SHA256 from Python's hmac and
hashlib), so the image cross-checks every format.

    python3 make_input.py            # recording.i16, tach.u32, config.bin, node.key
    python3 make_input.py flash [--revs N] [--unset-band]
        # flash.bin in the current folder: identity (node 1, node.key) and the
        # configuration (counter 0; version 2 when --revs or --unset-band)
    python3 make_input.py downlinks SPEC...
        # downlinks.bin: one receive window per SPEC, in order:
        #   config:COUNTER:REVS   a signed configuration downlink (version 2 record)
        #   badtag:COUNTER:REVS   the same with the last tag bit flipped
        #   node:COUNTER:REVS     signed for node 2 instead of node 1
        #   survey:COUNTER        a signed band-survey request
        #   unsigned:REVS         0x01 + record without authentication (old format)
        #   none                  no downlink in this window
"""
import hashlib
import hmac
import struct
import sys
import zlib
from pathlib import Path

import numpy as np

FS = 25_600
RPM = 1480.0
SECONDS = 5.6
RNG = np.random.default_rng(7)
HERE = Path(__file__).parent
NODE_ID = 1
# Downlink key of the fictional stand's node 1: a test key, published here on
# purpose. A real node gets 32 random bytes from `envord gateway provision`.
TEST_KEY = hashlib.sha256(b"envord test key, Quorvalith stand TS-7, node 1").digest()
PAGE = 4096
FLASH_PAGES = 5  # config A, config B, baseline A, baseline B, identity


def config_record(revs=64, version=1, band_source=0):
    """Version 1 (the committed config.bin), 2 or 3 (band source 0
    configured, 2 unset: zero band edges, the node surveys). Version 3: the
    point's spectrum and search at the node's defaults (64 samples/rev, 60 %
    speed change, abs rectifier, Hann, ISO group 2 rigid, default search:
    no search block), one shaft, the bearing by geometry."""
    body = b"EP" + bytes([version, 0])  # magic, version, length patched below
    if version == 3:
        body += b"\x00"  # the length is a u16 from version 3
    body += struct.pack("<I", FS)
    band = (0.0, 0.0) if band_source == 2 else (2000.0, 8000.0)
    body += struct.pack("<ff", *band)
    body += struct.pack("<BBH", 4, 1, revs)  # poles, pulses/rev, record revolutions
    body += struct.pack("<ff", 1400.0, 3600.0)  # speed range rpm
    body += struct.pack("<I", FS)  # tach ticks = sample clock
    body += struct.pack("<HI", 50, 3600)  # settle ms, interval s
    body += struct.pack("<HhHH", 4, 2047, 1, 100)  # flat, clip level, clip/saturated per mille
    body += struct.pack("<H", 3000)  # low battery mV
    body += struct.pack("<ff", 6.0, 12.0)  # alert / alarm dB
    body += struct.pack("<f", 0.008789)  # g per count: 100 mV/g sensor, 3.6 V / 4096 counts
    if version == 3:
        body += bytes([band_source]) + struct.pack("<f", 0.0)  # band source, kurtosis
        body += struct.pack("<Hf", 64, 60.0)  # samples/rev, speed change %
        body += bytes([0, 1, 1, 0])  # options, shafts, bearings, meshes
        body += struct.pack("<f", 1.0)  # the tach shaft
        body += bytes([0x01, 9]) + struct.pack("<fff", 7.94, 39.04, 0.0)
        length = len(body) + 4
        body = body[:3] + struct.pack("<H", length) + body[5:]
        return body + struct.pack("<I", zlib.crc32(body))
    body += bytes([1, band_source if version == 2 else 0])  # one bearing, band source
    if version == 2:
        body += struct.pack("<f", 0.0)  # survey kurtosis (none)
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


def identity_record(node_id, key):
    body = b"EI" + bytes([1, 0]) + struct.pack("<HH", node_id, 0) + key
    return body + struct.pack("<I", zlib.crc32(body))


def page_copy(seq, payload):
    """One copy of a record in a flash page (firmware/src/store.rs)."""
    body = struct.pack("<IHH", seq, len(payload), 0xFFFF) + payload
    img = struct.pack("<I", int.from_bytes(b"ENVS", "little")) + body
    img += struct.pack("<I", zlib.crc32(body))
    return img + b"\xff" * (-len(img) % 4)


def flash_image(config, counter=0):
    img = bytearray(b"\xff" * (PAGE * FLASH_PAGES))
    copy = page_copy(1, struct.pack("<I", counter) + config)
    img[0 : len(copy)] = copy
    ident = identity_record(NODE_ID, TEST_KEY)
    img[4 * PAGE : 4 * PAGE + len(ident)] = ident
    return bytes(img)


def sign(node_id, counter, payload, key=TEST_KEY):
    """Downlink frame (firmware/src/downlink_auth.rs): version 1, node id and
    counter big-endian, payload, leftmost 8 bytes of HMAC-SHA256."""
    body = struct.pack(">BHI", 1, node_id, counter) + payload
    return body + hmac.new(key, body, hashlib.sha256).digest()[:8]


def downlink(spec):
    kind, *args = spec.split(":")
    if kind == "none":
        return b""
    if kind == "survey":
        return sign(NODE_ID, int(args[0]), b"\x04")
    if kind == "unsigned":
        return b"\x01" + config_record(int(args[0]), version=2)
    counter, revs = int(args[0]), int(args[1])
    payload = b"\x01" + config_record(revs, version=2)
    if kind == "config":
        return sign(NODE_ID, counter, payload)
    if kind == "badtag":
        frame = bytearray(sign(NODE_ID, counter, payload))
        frame[-1] ^= 0x01
        return bytes(frame)
    if kind == "node":
        return sign(NODE_ID + 1, counter, payload)
    raise SystemExit(f"unknown downlink spec {spec!r}")


def main(argv):
    if argv[:1] == ["flash"]:
        revs = int(argv[argv.index("--revs") + 1]) if "--revs" in argv else None
        unset = "--unset-band" in argv
        if revs is None and not unset:
            config = (HERE / "config.bin").read_bytes()
        else:
            config = config_record(revs or 64, version=2, band_source=2 if unset else 0)
        Path("flash.bin").write_bytes(flash_image(config))
        return
    if argv[:1] == ["downlinks"]:
        out = b""
        for spec in argv[1:]:
            frame = downlink(spec)
            out += struct.pack("<H", len(frame)) + frame
        Path("downlinks.bin").write_bytes(out)
        return
    samples, edges = recording()
    samples.tofile("recording.i16")
    edges.tofile("tach.u32")
    Path("config.bin").write_bytes(config_record())
    Path("node.key").write_text(TEST_KEY.hex() + "\n")
    print(f"{len(samples)} samples, {len(edges)} edges, config {len(config_record())} bytes")


if __name__ == "__main__":
    main(sys.argv[1:])
