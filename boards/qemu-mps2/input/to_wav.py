"""Writes recording.i16 as an int16 WAV and tach.u32 as an edge CSV (sample
column) for `envord analyze`, standard library only.

    python3 to_wav.py OUT_DIR [SAMPLES]

With SAMPLES, only the first SAMPLES samples (and the edges among them) are
written: the capture of the node's first cycle, for the band-survey check.
"""
import array
import sys
import wave
from pathlib import Path

here = Path(__file__).parent
out = Path(sys.argv[1])
samples = array.array("h")
samples.frombytes((here / "recording.i16").read_bytes())
if len(sys.argv) > 2:
    samples = samples[: int(sys.argv[2])]
with wave.open(str(out / "recording.wav"), "wb") as w:
    w.setnchannels(1)
    w.setsampwidth(2)
    w.setframerate(25600)
    w.writeframes(samples.tobytes())
edges = array.array("I")
edges.frombytes((here / "tach.u32").read_bytes())
edges = [e for e in edges if e < len(samples)]
(out / "edges.csv").write_text("sample\n" + "".join(f"{e}\n" for e in edges))
