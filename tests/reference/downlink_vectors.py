#!/usr/bin/env python3
"""Signed downlink vectors, computed independently of the Rust code with
Python's hmac and hashlib (HMAC-SHA256, RFC 2104 / FIPS 180-4) and the
configuration encoder of boards/qemu-mps2/input/make_input.py.

host-sim/tests/gateway_downlink.rs checks that `envord gateway downlink`
writes exactly these frames and that the firmware's verifier accepts them.

    python3 tests/reference/downlink_vectors.py          # rewrite the vectors
    python3 tests/reference/downlink_vectors.py --check  # compare with the committed file
"""
import hashlib
import hmac
import importlib.util
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "host-sim/tests/data/downlink_vectors.json"

spec = importlib.util.spec_from_file_location(
    "make_input", ROOT / "boards/qemu-mps2/input/make_input.py"
)
mi = importlib.util.module_from_spec(spec)
spec.loader.exec_module(mi)

# RFC 4231 test case 2 first: the HMAC used below must reproduce it.
assert (
    hmac.new(b"Jefe", b"what do ya want for nothing?", hashlib.sha256).hexdigest()
    == "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
)

OTHER_KEY = hashlib.sha256(b"envord test key, Quorvalith crusher CR-2, node 2583").digest()


def vector(name, key, node, counter, payload, args):
    return {
        "name": name,
        "key": key.hex(),
        "node_id": node,
        "counter": counter,
        "args": args,
        "payload": payload.hex(),
        "frame": mi.sign(node, counter, payload, key).hex(),
    }


def build():
    return {
        "about": "signed downlinks by tests/reference/downlink_vectors.py (Python hmac/hashlib, make_input.py encoder)",
        "vectors": [
            vector("measure-now", mi.TEST_KEY, 1, 1, b"\x02", ["measure-now"]),
            vector("survey", OTHER_KEY, 0x0A17, 0xFFFFFFFF, b"\x04", ["survey"]),
            # the stand's point with 32 revolutions; settle 50 ms as make_input.py
            vector(
                "config",
                mi.TEST_KEY,
                1,
                7,
                b"\x01" + mi.config_record(32, version=3),
                ["config", "--point", "{point32}", "--settle-ms", "50"],
            ),
            # the same without a band: the node surveys it
            vector(
                "config-unset-band",
                mi.TEST_KEY,
                1,
                8,
                b"\x01" + mi.config_record(32, version=3, band_source=2),
                ["config", "--point", "{point32_noband}", "--settle-ms", "50"],
            ),
        ],
    }


def main():
    text = json.dumps(build(), indent=1) + "\n"
    if "--check" in sys.argv:
        if OUT.read_text() != text:
            print(f"{OUT} differs from a fresh computation")
            sys.exit(1)
        print("downlink vectors match")
        return
    OUT.write_text(text)
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
