"""A DAQ-style loop: blocks of two microphones are streamed as they are "acquired" (a stand-in
that synthesizes them), and the server answers with the tones once the run ends.

    python daq_loop.py [--server HOST:PORT] [--seconds 2]

The stand-in DAQ (invented): 3.6 mV/Pa microphones, a 5.2 kHz tone of 100 Pa amplitude in
opposite phase on the two channels, broadband noise, blocks of 8192 frames at 204.8 kHz in volts.
"""
import argparse

import numpy as np

from jetloop_client import Calibration, Client

FS, SENS = 204_800.0, 0.0036

p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
p.add_argument("--server", default="127.0.0.1:50051")
p.add_argument("--seconds", type=float, default=2.0)
a = p.parse_args()


def acquire(seconds, frames=8192):
    rng = np.random.default_rng(3)
    for start in range(0, int(seconds * FS), frames):
        t = (start + np.arange(frames)) / FS
        pa = 100.0 * np.sin(2 * np.pi * 5200.0 * t)
        volts = np.stack([pa, -pa], axis=1) * SENS + rng.normal(0.0, 2.0 * SENS, (frames, 2))
        yield volts


with Client(a.server) as c:
    r = c.extract_tones_stream(acquire(a.seconds), FS, 2, Calibration.microphone(SENS, 1.0), segment_length=16384)
for ch in r.channels:
    top = max(ch.tones, key=lambda t: t.level_db)
    print(f"channel {ch.channel}: {top.frequency_hz:.1f} Hz at {top.level_db:.2f} dB re 20 uPa")
