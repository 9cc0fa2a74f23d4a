"""Benchmark: jetloop ExtractTones (tones + bands, over loopback gRPC) against SciPy's
welch + find_peaks in-process, on the same 2^21 float32 samples at 204.8 kHz, Hann 8192,
50 % overlap. Both are timed side by side in one run.

Usage: python3 bench/spectrum_vs_scipy.py [--server-bin target/release/jetloop-server] [--repeats 15]
(starts its own server on a free loopback port; needs grpcio, grpcio-tools, numpy, scipy).
"""
import argparse
import importlib
import pathlib
import statistics
import subprocess
import sys
import time

import grpc
import numpy as np
from scipy.signal import find_peaks, welch

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "python"))
import conftest  # noqa: E402  (stub generation shared with the tests)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--server-bin", default=str(ROOT / "target" / "release" / "jetloop-server"))
    ap.add_argument("--repeats", type=int, default=15)
    args = ap.parse_args()
    conftest._generate_stubs()
    sp = importlib.import_module("jetloop.v1.spectrum_pb2")
    sp_grpc = importlib.import_module("jetloop.v1.spectrum_pb2_grpc")

    fs, n, nper = 204_800.0, 1 << 21, 8192
    rng = np.random.default_rng(1)
    t = np.arange(n) / fs
    x = (rng.normal(0, 5.0, n) + 300 * np.sin(2 * np.pi * 5230 * t) + 100 * np.sin(2 * np.pi * 10460 * t)).astype(np.float32)
    payload = x.astype("<f4").tobytes()

    proc = subprocess.Popen([args.server_bin, "--listen", "127.0.0.1:0"], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    try:
        addr = proc.stdout.readline().strip().rsplit(" ", 1)[1]
        opts = [("grpc.max_send_message_length", 64 << 20), ("grpc.max_receive_message_length", 64 << 20)]
        ch = grpc.insecure_channel(addr, options=opts)
        grpc.channel_ready_future(ch).result(timeout=10)
        stub = sp_grpc.SpectrumServiceStub(ch)
        req = sp.ExtractTonesRequest(
            samples=sp.Samples(sample_rate_hz=fs, raw=sp.RawSamples(data=payload, format=sp.SAMPLE_FORMAT_F32_LE)),
            welch=sp.WelchOptions(window=sp.WINDOW_KIND_HANN, segment_length=nper, overlap_fraction=0.5),
            include_band_levels=True,
        )

        def ours():
            r = stub.ExtractTones(req)
            return r.compute_time_s

        def scipy_ref():
            f, p = welch(x, fs=fs, window="hann", nperseg=nper, noverlap=nper // 2)
            find_peaks(10 * np.log10(p), prominence=6)

        for _ in range(3):
            ours()
            scipy_ref()
        t_ours, t_server, t_scipy = [], [], []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            t_server.append(ours())
            t_ours.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            scipy_ref()
            t_scipy.append(time.perf_counter() - t0)
        ch.close()
    finally:
        proc.terminate()
        proc.wait(timeout=10)

    mo, ms, mc = statistics.median(t_ours), statistics.median(t_scipy), statistics.median(t_server)
    msamp = n / 1e6
    print(f"2^21 float32 samples at {fs:.0f} Hz, Hann {nper}, 50 % overlap, {args.repeats} repeats (medians)")
    print(f"  jetloop ExtractTones + bands over loopback gRPC: {mo*1e3:8.2f} ms  ({mo*1e3/msamp:6.2f} ms per million samples)")
    print(f"    of which server compute:                      {mc*1e3:8.2f} ms  ({mc*1e3/msamp:6.2f} ms per million samples)")
    print(f"  scipy.signal.welch + find_peaks in-process:      {ms*1e3:8.2f} ms  ({ms*1e3/msamp:6.2f} ms per million samples)")
    print(f"  ratio jetloop / scipy: {mo/ms:.3f} (target <= 0.2)")


if __name__ == "__main__":
    main()
