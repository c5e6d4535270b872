#!/usr/bin/env python3
"""Rebuilds the CWRU excerpts in this folder and prints the reference values
that host-sim/tests/wav_cwru.rs checks. Run from this folder; SHARED points
at the shared data set (default /work/shared/data, i.e. ../shared/data next
to the main checkout)."""
import os, struct, sys, wave
import numpy as np
from scipy.io import wavfile

SHARED = os.environ.get("SHARED", "/work/shared/data")
src = f"{SHARED}/cwru/cwru-12k-de-or007at6-1hp.de.wav"
srcfe = f"{SHARED}/cwru/cwru-12k-de-or007at6-1hp.fe.wav"
N = 2000

# 1) float32 mono excerpt: the original bytes of frames 0..2000, keeping the
#    original header layout (fmt size 18 + fact chunk); only sizes patched.
raw = open(src, "rb").read()
hdr = bytearray(raw[:58])
assert hdr[38:42] == b"fact" and hdr[50:54] == b"data"
data = raw[58:58 + 4 * N]
struct.pack_into("<I", hdr, 4, len(hdr) - 8 + len(data))
struct.pack_into("<I", hdr, 46, N)
struct.pack_into("<I", hdr, 54, len(data))
open("cwru131_de_excerpt_f32.wav", "wb").write(bytes(hdr) + data)
fs, x = wavfile.read(src)
fs2, y = wavfile.read("cwru131_de_excerpt_f32.wav")
assert fs2 == 12000 and np.array_equal(y, x[:N])
print("f32 first8", [repr(float(v)) for v in y[:8]])
print("f32 [1000], [1999]", repr(float(y[1000])), repr(float(y[1999])))
print("f32 sum", float(np.sum(y.astype(np.float64))), "max", float(y.max()), "argmax", int(np.argmax(y)))

# 2) int16 stereo excerpt (DE, FE), quantised as round(x * 8192), written
#    and read back with Python's `wave` module.
_, xf = wavfile.read(srcfe)
de = np.clip(np.round(x[:N] * 8192.0), -32768, 32767).astype("<i2")
fe = np.clip(np.round(xf[:N] * 8192.0), -32768, 32767).astype("<i2")
inter = np.empty(2 * N, dtype="<i2"); inter[0::2] = de; inter[1::2] = fe
w = wave.open("cwru131_de_fe_excerpt_i16.wav", "wb")
w.setnchannels(2); w.setsampwidth(2); w.setframerate(12000); w.writeframes(inter.tobytes()); w.close()
w = wave.open("cwru131_de_fe_excerpt_i16.wav", "rb")
print("wave params", w.getparams())
fr = np.frombuffer(w.readframes(w.getnframes()), dtype="<i2")
print("i16 first frames", fr[:10].tolist(), "last frame", fr[3998:4000].tolist(),
      "sum de", int(fr[0::2].astype(np.int64).sum()), "sum fe", int(fr[1::2].astype(np.int64).sum()))
