"""Benchmark: jetloop tone extraction (tones + bands, over loopback gRPC) against SciPy's
welch + find_peaks in-process, on the same 2^21 float32 samples at 204.8 kHz, Hann 8192,
50 % overlap. All are timed side by side in one run, each call right after a SciPy call.

jetloop is timed two ways: ExtractTones (one 8 MB request) and ExtractTonesStream (the same
samples in blocks of --block-bytes, analysed while they arrive). Request messages are built
before timing in both cases, as the SciPy input array is.

Usage: python3 bench/spectrum_vs_scipy.py [--server-bin target/release/jetloop-server]
       [--repeats 21] [--block-bytes 524288]
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
    ap.add_argument("--repeats", type=int, default=21)
    ap.add_argument("--block-bytes", type=int, default=512 * 1024)
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

        head = sp.SampleBlock(
            request=sp.ExtractTonesRequest(
                samples=sp.Samples(sample_rate_hz=fs, raw=sp.RawSamples(format=sp.SAMPLE_FORMAT_F32_LE)),
                welch=req.welch,
                include_band_levels=True,
            )
        )
        bb = args.block_bytes - args.block_bytes % 4
        blocks = [head] + [sp.SampleBlock(frames=payload[i : i + bb]) for i in range(0, len(payload), bb)]

        def unary():
            return stub.ExtractTones(req)

        def stream():
            return stub.ExtractTonesStream(iter(blocks))

        def scipy_ref():
            f, p = welch(x, fs=fs, window="hann", nperseg=nper, noverlap=nper // 2)
            find_peaks(10 * np.log10(p), prominence=6)

        # The two ways give the same tones.
        a, b = unary().channels[0].tones, stream().channels[0].tones
        assert [t.frequency_hz for t in a] == [t.frequency_hz for t in b], (a, b)
        for _ in range(3):
            unary()
            stream()
            scipy_ref()
        t = {"unary": [], "unary_server": [], "stream": [], "stream_tail": [], "scipy": []}
        for _ in range(args.repeats):
            for name, call in (("unary", unary), ("stream", stream)):
                scipy_ref()
                t0 = time.perf_counter()
                r = call()
                t[name].append(time.perf_counter() - t0)
                t["unary_server" if name == "unary" else "stream_tail"].append(r.compute_time_s)
            t0 = time.perf_counter()
            scipy_ref()
            t["scipy"].append(time.perf_counter() - t0)
        ch.close()
    finally:
        proc.terminate()
        proc.wait(timeout=10)

    med = {k: statistics.median(v) * 1e3 for k, v in t.items()}
    msamp = n / 1e6
    ms = med["scipy"]
    print(f"2^21 float32 samples at {fs:.0f} Hz, Hann {nper}, 50 % overlap, {args.repeats} repeats (medians)")
    for label, k in (
        ("jetloop ExtractTones + bands, loopback gRPC", "unary"),
        ("  of which server compute", "unary_server"),
        (f"jetloop ExtractTonesStream, {bb // 1024} KiB blocks", "stream"),
        ("  of which after the last block", "stream_tail"),
        ("scipy.signal.welch + find_peaks in-process", "scipy"),
    ):
        print(f"  {label:<48} {med[k]:8.2f} ms  ({med[k] / msamp:6.2f} ms per million samples)")
    for k in ("unary", "stream"):
        print(f"  ratio jetloop {k} / scipy: {med[k] / ms:.3f} (target <= 0.2)")


if __name__ == "__main__":
    main()
