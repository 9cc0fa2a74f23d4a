"""Tones and one-third-octave bands of a WAV recording (16/32-bit integer or 32-bit float).

    python tones_from_wav.py FILE.wav --pa-per-unit 2000 [--server HOST:PORT]

WAV files carry no calibration: give pascals per unit (per full-scale unit for float files, per
count for integer files), as the DAQ's calibration sheet says.
"""
import argparse
import struct

import numpy as np

from jetloop_client import Calibration, Client


def read_wav(path):
    """(samples (frames, channels) as float64 in file units, sample rate in Hz)."""
    data = open(path, "rb").read()
    if data[:4] != b"RIFF" or data[8:12] != b"WAVE":
        raise SystemExit(f"{path}: not a WAV file")
    pos, fmt, frames = 12, None, None
    while pos + 8 <= len(data):
        cid, size = data[pos:pos + 4], struct.unpack("<I", data[pos + 4:pos + 8])[0]
        body = data[pos + 8:pos + 8 + size]
        if cid == b"fmt ":
            tag, channels, rate, _, _, bits = struct.unpack("<HHIIHH", body[:16])
            if tag == 0xFFFE:  # WAVE_FORMAT_EXTENSIBLE: the sub-format's first two bytes
                tag = struct.unpack("<H", body[24:26])[0]
            fmt = (tag, channels, rate, bits)
        elif cid == b"data":
            frames = body
        pos += 8 + size + (size & 1)
    tag, channels, rate, bits = fmt
    dtype = {(3, 32): "<f4", (1, 16): "<i2", (1, 32): "<i4"}.get((tag, bits))
    if dtype is None:
        raise SystemExit(f"{path}: {bits}-bit format {tag} not supported (16/32-bit integer, 32-bit float)")
    x = np.frombuffer(frames, dtype=dtype).astype(np.float64)
    return x.reshape(-1, channels), float(rate)


p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
p.add_argument("wav")
p.add_argument("--pa-per-unit", type=float, required=True)
p.add_argument("--server", default="127.0.0.1:50051")
a = p.parse_args()

x, fs = read_wav(a.wav)
with Client(a.server) as c:
    r = c.extract_tones(x, fs, Calibration.pascals_per_unit(a.pa_per_unit))
    b = c.band_levels(x, fs, Calibration.pascals_per_unit(a.pa_per_unit))
for ch, bands in zip(r.channels, b.channels):
    print(f"channel {ch.channel}: overall {ch.overall_level_db:.1f} dB re 20 uPa, "
          f"A-weighted {bands.bands.a_weighted_overall_db:.1f} dB(A)")
    for t in sorted(ch.tones, key=lambda t: -t.level_db)[:5]:
        print(f"  tone {t.frequency_hz:9.1f} Hz  {t.level_db:6.1f} dB re 20 uPa  {t.tone_to_floor_db:5.1f} dB above floor")
    for c_ in ch.cautions:
        print(f"  CAUTION: {c_}")
